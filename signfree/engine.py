"""The Fourier engine: Z(mu)/Z(0) = Int exp(p(q) + i mu q) dq / Int exp(p(q)) dq
over the data domain, in Arb ball arithmetic (Johansson, IEEE Trans. Computers
2017, through python-flint), for many models and many mu at once.

Why ball arithmetic at chosen precision: the integral cancels over
D = -log10 |Z(mu)/Z(0)| decimal orders, so the working precision must be at
least D + wanted digits + a guard. Balls bound the rounding error; they do not
bound the quadrature error, which is checked here by node refinement (an
n-point and a 1.5 n-point Gauss-Legendre rule must agree), or bounded
rigorously with ``acb.integral`` (``certify=True``), whose enclosure is
rigorous for an entire integrand such as exp(polynomial + i mu q).

Batch route (Chebyshev models): Gauss-Legendre nodes x_j and weights w_j on
[-1, 1] (cached per node count and precision); the model values at the nodes
as one matrix product of the coefficient matrix with T_k(x_j);
W[r, j] = w_j exp(p_r(q_j)); and Z = W E with E[j, k] = exp(i mu_k q_j) as one
ball-arithmetic matrix product. On an evenly spaced mu grid
mu_k = mu_0 + (a B + b) h the exponential factorises,
E[j, aB+b] = G[j, a] F[j, b], so only n (A + B) exponentials are needed and the
product is (W * G) F. Gauss-Legendre error theory: Trefethen, Approximation
Theory and Approximation Practice, ch. 19.

Piecewise-linear models are integrated exactly, segment by segment.
"""
import bisect
import math
import os
import tempfile
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import mpmath
import numpy as np
from flint import acb, acb_mat, arb, arb_mat, ctx, fmpq

GUARD_DIGITS = 10
MAX_PREC = 1 << 15          # bits (about 9900 digits)
MAX_NODES = 8000
LOG2_10 = math.log2(10.0)


@dataclass
class Transform:
    """Z(mu)/Z(0) for a batch of models (rows) and mu (columns).

    values     rows x mu, acb balls (their radii bound the rounding error)
    quad_err   rows x mu, mpmath mpf bounds on the integration plus rounding
               error of the value (relative to Z(0), like the value)
    log_z0     per row, ln of the unnormalised Int exp(p) dq
    resolved   per mu: the wanted digits were reached within the limits
    prec       working precision in bits; nodes: Gauss-Legendre node count
    method     'gauss-legendre', 'acb.integral' or 'exact-segments'
    mus        the mu values used, as exact fractions
    gradient   for chebyshev_transform(..., gradient=ks): (rows over k of
               dZ_0(mu)/dc_k / Z_0(0), list over k of dZ_0(0)/dc_k / Z_0(0))
    """

    values: list
    quad_err: list
    log_z0: list
    resolved: list
    prec: int
    nodes: int
    method: str
    mus: list
    gradient: tuple = None


def to_mpf(x):
    """An arb midpoint as an mpmath mpf (exact; any exponent)."""
    man, exp = x.mid().man_exp()
    return mpmath.mpf((int(man), int(exp)))


def upper(x):
    """An upper bound of |x| for an arb or acb ball, as an mpmath mpf."""
    if isinstance(x, acb):
        return upper(x.real.abs_upper()) + upper(x.imag.abs_upper())
    man, exp = x.abs_upper().man_exp()
    return mpmath.mpf((int(man), int(exp)))


def difference(a, b):
    """a - b for arb or acb balls, exactly (Arb rounds every operation to the
    context precision, 53 bits outside a ``workprec`` block)."""
    with ctx.workprec(MAX_PREC):
        return a - b


def abs_mid(z):
    """|mid z| of an acb ball as an mpf."""
    return mpmath.hypot(to_mpf(z.real), to_mpf(z.imag))


def as_fractions(mus):
    """mu values as exact fractions. Floats that are evenly spaced to within
    a few units in the last place (as from numpy.linspace) are snapped onto the
    exact grid, which lets the engine factorise exp(i mu q); the snap moves a
    mu by at most 4 ulp."""
    out = [m if isinstance(m, Fraction) else Fraction(float(m)) for m in mus]
    if len(out) >= 3 and uniform_step(out) is None:
        h = (out[-1] - out[0]) / (len(out) - 1)
        grid = [out[0] + k * h for k in range(len(out))]
        scale = max(abs(float(m)) for m in out) or 1.0
        if h != 0 and all(abs(float(g - m)) <= 4 * np.spacing(scale) for g, m in zip(grid, out)):
            return grid
    return out


def uniform_step(mus):
    """The step h if mus are evenly spaced (exactly, as fractions), else None."""
    if len(mus) < 3:
        return None
    h = mus[1] - mus[0]
    if h == 0 or any(mus[i + 1] - mus[i] != h for i in range(len(mus) - 1)):
        return None
    return h


def _on_ladder(n):
    """The smallest node count >= n on the ladder 32 * 1.1^k (rounded up),
    so that node sets (and their cache) are shared between calls."""
    m = 32
    while m < n:
        m = -(-11 * m // 10)
    return m


def precision_bits(depth, digits, magnitude=1.0, nodes=64):
    """Working precision for a cancellation depth (decimal orders), wanted
    digits, the size of the exponent p and the number of summed terms."""
    bits = (max(depth, 0.0) + digits + GUARD_DIGITS) * LOG2_10
    bits += math.log2(abs(magnitude) + 2.0) + math.log2(nodes + 1.0) + 16
    return int(min(MAX_PREC, math.ceil(bits / 64.0) * 64))


_NODES = {}


def _cache_dir():
    """Where computed Gauss-Legendre rules are kept between runs:
    $SIGNFREE_CACHE, else ~/.cache/signfree; SIGNFREE_CACHE=off keeps none.
    The files hold exact balls (integer mantissas and exponents), so a rule
    read back is the rule computed."""
    where = os.environ.get("SIGNFREE_CACHE")
    if where == "off":
        return None
    return Path(where) if where else Path.home() / ".cache" / "signfree"


def _ball_ints(x):
    m, e = x.mid().man_exp()
    rm, re = x.rad().man_exp()
    return f"{int(m):x} {int(e)} {int(rm):x} {int(re)}"


def _ball(fields):
    m, e, rm, re = int(fields[0], 16), int(fields[1]), int(fields[2], 16), int(fields[3])
    return arb(arb(m) * arb(2) ** e, arb(rm) * arb(2) ** re)


def _read_rule(n, prec):
    folder = _cache_dir()
    if folder is None:
        return None
    best = None
    for path in folder.glob(f"gauss-legendre-{n}-*.txt"):
        try:
            p = int(path.stem.rsplit("-", 1)[1])
        except ValueError:
            continue
        if p >= prec and (best is None or p < best[0]):
            best = (p, path)
    if best is None:
        return None
    try:
        lines = best[1].read_text().split("\n")
        with ctx.workprec(best[0] + 16):
            half = [(_ball(f[:4]), _ball(f[4:])) for f in (ln.split() for ln in lines if ln)]
    except (OSError, ValueError, IndexError):
        return None
    return half if len(half) == (n + 1) // 2 else None


def _write_rule(n, prec, half):
    folder = _cache_dir()
    if folder is None:
        return
    try:
        folder.mkdir(parents=True, exist_ok=True)
        text = "".join(f"{_ball_ints(x)} {_ball_ints(w)}\n" for x, w in half)
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=".gl-")
        with os.fdopen(fd, "w") as f:
            f.write(text)
        os.replace(tmp, folder / f"gauss-legendre-{n}-{prec}.txt")
    except OSError:
        pass  # a cache that cannot be written only costs time


def gauss_legendre(n, prec):
    """Nodes and weights of the n-point Gauss-Legendre rule on [-1, 1] to at
    least ``prec`` bits (Arb's arb_hypgeom_legendre_p_ui_root). A rule once
    computed at some precision serves every lower one, in this process and,
    through :func:`_cache_dir`, in later runs."""
    if (n, prec) in _NODES:
        return _NODES[n, prec]
    for (m, p), (xs, ws) in list(_NODES.items()):
        if m == n and p > prec:
            # rounded to the working precision: Arb's matrix products lose
            # accuracy on entries carried at far more bits than they work at
            with ctx.workprec(prec + 16):
                _NODES[n, prec] = (tuple(+x for x in xs), tuple(+w for w in ws))
            return _NODES[n, prec]
    half = _read_rule(n, prec)
    if half is None:
        with ctx.workprec(prec + 16):
            half = [arb.legendre_p_root(n, k, weight=True) for k in range((n + 1) // 2)]
        _write_rule(n, prec, half)
    with ctx.workprec(prec + 16):  # negation rounds too: keep it inside
        xs = [x for x, _ in half] + [-x for x, _ in reversed(half[: n // 2])]
        ws = [w for _, w in half] + [w for _, w in reversed(half[: n // 2])]
    if len(_NODES) >= 24:
        _NODES.pop(next(iter(_NODES)))
    _NODES[n, prec] = (tuple(xs), tuple(ws))
    return _NODES[n, prec]


_CHEB = {}


def chebyshev_matrix(n, prec, degree):
    """T_k(x_j) for k <= degree at the n Gauss-Legendre nodes, as arb_mat;
    one computed at a higher precision or degree serves."""
    for (m, p, d), T in _CHEB.items():
        if m == n and p >= prec and d == degree:
            return T
    xs, _ = gauss_legendre(n, prec)
    # T_k(cos t) = Re exp(i k t), exp(i t) = x + i sqrt(1 - x^2): with
    # rectangular complex balls each power can widen the radius by up to
    # sqrt(2), so the powers are taken from the exact node midpoints
    # degree/2 + 32 bits above prec and rounded to prec at the end; the
    # nodes' own radii r enter as k^2 r (|T_k'| <= k^2 on [-1, 1])
    with ctx.workprec(prec + degree // 2 + 32):
        steps = [acb(x.mid(), (1 - x.mid() * x.mid()).sqrt()) for x in xs]
        powers, table = list(steps), []
        for _ in range(1, degree + 1):
            table.append([z.real for z in powers])
            powers = [z * s for z, s in zip(powers, steps)]
    with ctx.workprec(prec):
        rows = [[arb(1)] * n] + [[+v + arb(0, (k + 1) ** 2 * x.rad()) for v, x in zip(row, xs)]
                                 for k, row in enumerate(table)]
        T = arb_mat(rows)
    if len(_CHEB) >= 8:
        _CHEB.pop(next(iter(_CHEB)))
    _CHEB[n, prec, degree] = T
    return T


def _model_profile(coef, domain):
    """Double-precision facts about exp(p) that set the starting precision and
    node count: variance of q and max |p| over the domain."""
    from numpy.polynomial import chebyshev as C
    a, b = domain
    x = np.cos(np.linspace(0, np.pi, 2001))
    p = C.chebval(x, coef)
    q = 0.5 * (a + b) + 0.5 * (b - a) * x
    w = np.exp(p - p.max()) * np.sqrt(1 - x * x)  # dq ~ sqrt(1 - x^2) dtheta
    w /= w.sum()
    mean = (w * q).sum()
    var = (w * (q - mean) ** 2).sum()
    return var, float(np.abs(p).max())


def _arb(x):
    """An exact rational (Fraction) or float as an arb at the current precision."""
    if isinstance(x, Fraction):
        return arb(fmpq(x.numerator, x.denominator))
    return arb(x)


def _exp_i(theta):
    return acb(0, theta).exp()


def _is_even(coef_rows, domain):
    """All rows even in q on a domain symmetric about 0 (odd Chebyshev
    coefficients zero): then Z(mu) is real and the nodes pair up."""
    a, b = domain
    return a == -b and all(c == 0 for row in coef_rows for c in row[1::2])


def _gl_pass(coef_rows, domain, pieces, n, grad_ks=()):
    """One Gauss-Legendre evaluation at n nodes for every piece (mus, prec)
    of a mu list.

    The model values and weights are computed once, at the highest precision
    of the pieces, and rounded for each piece (Arb's matrix products are
    slow on entries longer than the working precision). Nodes whose weight
    lies below 2^-(prec + 16) of the largest in every row are left out of
    that piece, their total weight added to the radius (a rigorous bound,
    since |exp(i mu q)| = 1). For even models only the nodes x >= 0 are used
    (paired weights) and exp(i mu q) becomes cos(mu q).

    Returns (per piece: ratios, log_z0, grad0): ratios[r][k] = Z_r(mu_k) /
    Z_r(0) as acb for every coefficient row, followed by one row per k in
    ``grad_ks`` holding Int T_k(x) exp(p_0 + i mu q) dq / Z_0(0) (the
    derivative of Z_0 with respect to c_k); grad0[k] is the same at mu = 0."""
    degree = max([len(c) for c in coef_rows] + [max(grad_ks, default=0) + 1]) - 1
    R = len(coef_rows)
    top = max(p for _, p in pieces)
    even = _is_even(coef_rows, domain)
    with ctx.workprec(top):
        xs, ws = gauss_legendre(n, top)
        T = chebyshev_matrix(n, top, degree)
        keep = range(n)
        if even:
            keep = [j for j in range(n) if xs[j] >= 0]  # the first (n + 1) // 2
        cm = arb_mat([[arb(float(c)) for c in row] + [arb(0)] * (degree + 1 - len(row))
                      for row in coef_rows])
        P = cm * T
        a, b = arb(domain[0]), arb(domain[1])
        half, mid = (b - a) / 2, (a + b) / 2
        qs = [mid + half * xs[j] for j in keep]
        wts = [ws[j] * (2 if even and not xs[j].is_zero() else 1) for j in keep]
        W, z0, log_z0, expo = [], [], [], []
        for r in range(R):
            vals = [P[r, j] for j in keep]
            shift = arb(max(float(v.mid()) for v in vals))
            expo.append([float(v.mid()) - float(shift.mid()) for v in vals])
            wr = [w * (v - shift).exp() for w, v in zip(wts, vals)]
            s = sum(wr, arb(0))
            W.append(wr)
            z0.append(s)
            log_z0.append(float(shift.mid()) + float((s * half).log().mid()))
        grad0 = []
        for k in grad_ks:
            W.append([w * T[k, j] for w, j in zip(W[0], keep)])
            z0.append(z0[0])
            grad0.append(sum(W[-1], arb(0)) / z0[0])
            expo.append(expo[0])
    out = []
    for mus, prec in pieces:
        with ctx.workprec(prec):
            # nodes whose weight is below 2^-(prec + 16) in every row
            cut = -(prec + 16) * math.log(2)
            used = [i for i in range(len(qs)) if max(e[i] for e in expo) > cut]
            gone = sorted(set(range(len(qs))) - set(used))
            dropped = [sum((W[r][i] for i in gone), arb(0)) for r in range(len(W))] \
                if gone else None
            Wp = [[+W[r][i] for i in used] for r in range(len(W))]
            qp = [+qs[i] for i in used]
            Z = _fourier_rows(Wp, qp, mus, even)
            if dropped is not None:
                Z = [[z + acb(arb(0, dropped[r].abs_upper()), arb(0, dropped[r].abs_upper()))
                      for z in Z[r]] for r in range(len(W))]
            ratios = [[z / z0[r] for z in Z[r]] for r in range(len(W))]
        out.append((ratios, log_z0, grad0))
    return out


def _fourier_rows(W, qs, mus, even=False):
    """sum_j W[r][j] exp(i mu_k q_j) (cos(mu_k q_j) when ``even``) for every
    row r and mu_k, as matrix products. On an even mu grid with few rows,
    exp(i mu q) factorises (G F, see the module docstring); otherwise
    E = exp(i mu q) is built (by rotation on an even grid) and multiplied as
    real matrices."""
    R, K, n = len(W), len(mus), len(qs)
    h = uniform_step(mus)
    if h is not None and K >= 16:
        B = math.isqrt(K - 1) + 1
        A = -(-K // B)
        G = [_powers(_exp_i(_arb(mus[0]) * q), _exp_i(_arb(B * h) * q), A) for q in qs]
        F = [_powers(acb(1), _exp_i(_arb(h) * q), B) for q in qs]
        if R * A < K:
            if even:
                # Re(G F) = Re G Re F - Im G Im F, with real W
                Mc = arb_mat([[W[r][j] * G[j][i].real for j in range(n)]
                              for r in range(R) for i in range(A)])
                Ms = arb_mat([[W[r][j] * G[j][i].imag for j in range(n)]
                              for r in range(R) for i in range(A)])
                Zc = Mc * arb_mat([[f.real for f in row] for row in F])
                Zs = Ms * arb_mat([[f.imag for f in row] for row in F])
                return [[acb(Zc[r * A + k // B, k % B] - Zs[r * A + k // B, k % B])
                         for k in range(K)] for r in range(R)]
            M = acb_mat([[W[r][j] * G[j][i] for j in range(n)] for r in range(R) for i in range(A)])
            Zm = M * acb_mat(F)
            return [[Zm[r * A + k // B, k % B] for k in range(K)] for r in range(R)]
        if even:
            # rotation keeps ball radii growing linearly (a three-term cosine
            # recurrence would let them grow geometrically)
            E = [[z.real for z in _powers(_exp_i(_arb(mus[0]) * q), _exp_i(_arb(h) * q), K)]
                 for q in qs]
        else:
            E = [[g * f for g in G[j] for f in F[j]][:K] for j in range(n)]
    else:
        mus_arb = [_arb(m) for m in mus]
        E = [[_exp_i(m * q) for m in mus_arb] for q in qs]
        if even:
            E = [[e.real for e in row] for row in E]
    Wm = arb_mat(W)
    if even:
        re = Wm * arb_mat(E)
        return [[acb(re[r, k]) for k in range(K)] for r in range(R)]
    re = Wm * arb_mat([[e.real for e in row] for row in E])
    im = Wm * arb_mat([[e.imag for e in row] for row in E])
    return [[acb(re[r, k], im[r, k]) for k in range(K)] for r in range(R)]


def _powers(start, step, count):
    out = [start]
    for _ in range(count - 1):
        out.append(out[-1] * step)
    return out


def _relative_radius(z):
    mag = abs_mid(z)
    rad = upper(acb(z.real.rad(), z.imag.rad()))
    return mpmath.inf if mag == 0 else rad / mag


def _chunks(mus):
    """Contiguous index ranges of the mu list that get their own working
    precision: four on an even grid of at least 64 points (each piece is
    itself an even grid), else one."""
    K = len(mus)
    if K < 64 or uniform_step(mus) is None:
        return [(0, K)]
    edges = [round(K * i / 4) for i in range(5)]
    return [(edges[i], edges[i + 1]) for i in range(4)]


def _check_set(mus, values, chunks):
    """Where the quadrature is checked by refinement, as (the piece checked
    whole, further single indices): the whole piece with the largest |mu| (the Gauss-Legendre error bound on the
    Bernstein ellipse grows with |mu|, Trefethen ATAP ch. 19), every local
    minimum of |Z| on the grid (a nearby zero asks the most relative
    accuracy), and the ends; on short lists every mu."""
    K = len(mus)
    top = max(chunks, key=lambda c: max(abs(mus[k]) for k in range(*c)))
    if len(chunks) == 1:
        return top, []
    picked = {0, K - 1}
    mags = [abs_mid(v) for v in values]
    for k in range(1, K - 1):
        if mags[k] <= mags[k - 1] and mags[k] <= mags[k + 1]:
            picked.add(k)
    return top, sorted(k for k in picked if not top[0] <= k < top[1])


def chebyshev_transform(models, mus, digits=12, certify=False, check_rows=None,
                        gradient=()):
    """Z(mu)/Z(0) for Chebyshev models sharing one domain.

    The working precision is chosen per piece of the mu list from the
    cancellation depth (first estimated from the model's variance, then
    raised until the balls of the first ``check_rows`` models carry
    ``digits``); every row is evaluated with an n-point Gauss-Legendre rule
    and the first row again with a 1.5 n-point rule at the mu of
    :func:`_check_set`; n is raised until the two agree to ``digits``. The
    quad_err of a mu not in the check set is the largest disagreement found
    at a checked mu of equal or larger |mu| (the error bound grows with |mu|).
    A mu whose digits cannot be reached within MAX_PREC bits and MAX_NODES
    nodes is marked unresolved (its value and quad_err still tell what was
    reached).

    Rows past ``check_rows`` (replicas, default: none) ride along with the
    same rule; their quad_err is None. ``gradient`` lists coefficient indices
    k whose derivatives dZ_0/dc_k are wanted: they come back in
    ``Transform.gradient`` as (rows over k of Int T_k exp(p_0 + i mu q) /
    Z_0(0), the same at mu = 0)."""
    mus = as_fractions(mus)
    K = len(mus)
    domain = models[0].domain
    if any(m.domain != domain for m in models):
        raise ValueError("models in one batch must share their domain")
    width = max(len(m.coef) for m in models)
    rows = [list(m.coef) + [0.0] * (width - len(m.coef)) for m in models]
    check_rows = len(models) if check_rows is None else check_rows
    var, pmax = _model_profile(models[0].coef, domain)
    half = 0.5 * (domain[1] - domain[0])
    degree = max(len(c) for c in rows) - 1
    depths = [float(m) ** 2 * var / (2 * math.log(10)) for m in mus]
    # starting node count from the Gauss-Legendre error bound on the
    # Bernstein ellipse (Trefethen, ATAP ch. 19) for exp(p) exp(i omega x)
    # with p near a Gaussian of width sigma_x in window units: the error
    # exp(-2 n s + omega s + s^2 / (2 sigma_x^2)) must fall below
    # 10^-(D + digits); the best s gives n = omega/2 + sqrt(ln10 (D+digits)/2)/sigma_x.
    sigma_x = max(math.sqrt(max(var, 0.0)) / half, 1e-6)
    omega = max(abs(float(m)) for m in mus) * half
    n = _on_ladder(1.1 * (omega / 2 + math.sqrt(1.15 * (max(depths) + digits + 5)) / sigma_x)
                   + 0.5 * degree + 16)
    chunks = _chunks(mus)
    precs = [precision_bits(max(depths[a:b]), digits, pmax, n) for a, b in chunks]
    tol = mpmath.mpf(10) ** (-(digits + 1))
    grad_ks = tuple(gradient)
    results = [None] * len(chunks)
    while True:
        values, log_z0, grad0 = [[] for _ in rows], None, None
        grad_rows = [[] for _ in grad_ks]
        prec_ok = [True] * K
        raise_any = False
        # one rule (and one Chebyshev matrix) at the top precision serves every piece
        chebyshev_matrix(n, max(precs), max(degree, max(grad_ks, default=0)))
        gauss_legendre(_on_ladder(1.5 * n), max(precs))

        todo = [c for c in range(len(chunks))
                if results[c] is None or results[c][0] != (n, precs[c])]
        if todo:
            fresh = _gl_pass(rows, domain, [(mus[chunks[c][0]:chunks[c][1]], precs[c])
                                            for c in todo], n, grad_ks)
            for c, res in zip(todo, fresh):
                results[c] = ((n, precs[c]), res)
        for c, (a, b) in enumerate(chunks):
            ratios, log_z0, g0 = results[c][1]
            grad0 = grad0 or g0
            for r in range(len(rows)):
                values[r].extend(ratios[r])
            for i in range(len(grad_ks)):
                grad_rows[i].extend(ratios[len(rows) + i])
            worst = mpmath.mpf(0)
            for k in range(a, b):
                rel = max(_relative_radius(values[r][k]) for r in range(check_rows))
                if rel > tol / 10:
                    prec_ok[k] = False
                    worst = max(worst, rel)
            if worst > 0 and precs[c] < MAX_PREC:
                extra = 2 * precs[c] if worst == mpmath.inf or worst >= 1 else \
                    precs[c] + float(mpmath.log(worst * 10 / tol, 2)) + 32
                precs[c] = min(MAX_PREC, int(math.ceil(extra / 64) * 64))
                results[c] = None
                raise_any = True
        if raise_any:
            continue
        n1 = _on_ladder(1.5 * n)
        top, extras = _check_set(mus, values[0], chunks)
        groups = []
        for c, (a, b) in enumerate(chunks):
            ks = [k for k in extras if a <= k < b] if (a, b) != top else list(range(a, b))
            if ks:
                groups.append((ks, precs[c]))
        fine = _gl_pass(rows[:1], domain, [([mus[k] for k in ks], p) for ks, p in groups], n1)
        diffs = {}
        for (ks, _), (ratios, _, _) in zip(groups, fine):
            diffs.update({k: upper(difference(values[0][k], z)) for k, z in zip(ks, ratios[0])})
        checked = sorted(diffs)
        quad_ok = all(diffs[k] <= tol * abs_mid(values[0][k]) for k in checked)
        if quad_ok or n1 > MAX_NODES:
            break
        n = n1
    resolved = []
    quad = [[None] * K for _ in rows]
    # the largest disagreement at a checked mu of equal or larger |mu|
    order = sorted(checked, key=lambda j: abs(mus[j]), reverse=True)
    suffix, running = [], mpmath.mpf(0)
    for j in order:
        running = max(running, diffs[j])
        suffix.append((abs(mus[j]), running))
    suffix.reverse()   # increasing |mu|, running max over larger |mu|
    keys = [m for m, _ in suffix]
    for k in range(K):
        if k in diffs:
            bound = diffs[k]
        else:
            i = bisect.bisect_left(keys, abs(mus[k]))
            bound = suffix[i][1] if i < len(suffix) else suffix[-1][1]
        ok = prec_ok[k] and bound <= tol * abs_mid(values[0][k])
        resolved.append(ok)
        for r in range(check_rows):
            z = values[r][k]
            quad[r][k] = bound + upper(acb(z.real.rad(), z.imag.rad()))
    prec = max(precs)
    grad = (grad_rows, grad0) if grad_ks else None
    if certify:
        cert, cert_quad, cert_ok = _certified(models[:check_rows], mus, digits, values, prec)
        values = cert + values[check_rows:]
        quad = cert_quad + quad[check_rows:]
        resolved = [a and b for a, b in zip(resolved, cert_ok)]
        method = "acb.integral"
    else:
        method = "gauss-legendre"
    return Transform(values=values, quad_err=quad, log_z0=log_z0, resolved=resolved,
                     prec=prec, nodes=n, method=method, mus=mus, gradient=grad)


def _clenshaw(coef, x):
    """sum_k c_k T_k(x) for an acb ball x (Clenshaw's recurrence)."""
    b1 = b2 = acb(0)
    for c in reversed(coef[1:]):
        b1, b2 = 2 * x * b1 - b2 + c, b1
    return x * b1 - b2 + coef[0]


def _certified(models, mus, digits, estimate, prec):
    """Rigorous enclosures by acb.integral (Petras' adaptive Gauss-Legendre
    with error bounds from the Bernstein ellipse, in Arb) for every model and
    mu; ``estimate`` (the batch values) sets the absolute tolerance."""
    values, quad = [], []
    ok = [True] * len(mus)
    a, b = models[0].domain
    with ctx.workprec(prec):
        half, mid = (arb(b) - arb(a)) / 2, (arb(a) + arb(b)) / 2
        for model in models:
            coef = [arb(float(c)) for c in model.coef]
            shift = arb(float(np.max(model.log_density(np.linspace(a, b, 513)))))

            def integral(mu, tol):
                m = _arb(mu)
                f = lambda x, _: (_clenshaw(coef, x) - shift + acb(0, m) * (mid + half * x)).exp()
                return acb.integral(f, -1, 1, abs_tol=tol, rel_tol=arb(2) ** (-prec + 8),
                                    eval_limit=10 ** 7)

            z0 = integral(0, arb(2) ** (-prec))
            row_v, row_q = [], []
            for k, mu in enumerate(mus):
                mag = abs_mid(estimate[0][k])
                tol = arb(mpmath.nstr(mag * mpmath.mpf(10) ** (-(digits + 3)), 5)) \
                    if mag > 0 else arb(2) ** (-prec)
                v = integral(mu, tol) / z0
                row_v.append(v)
                row_q.append(upper(acb(v.real.rad(), v.imag.rad())))
                if _relative_radius(v) > mpmath.mpf(10) ** (-digits):
                    ok[k] = False
            values.append(row_v)
            quad.append(row_q)
    return values, quad, ok


def segment_transform(models, mus, digits=12):
    """Z(mu)/Z(0) for piecewise-linear ln rho, exact per segment:
    Int_{t_j}^{t_j + h_j} exp(v_j + s_j (q - t_j) + i mu q) dq
      = h_j exp(v_j + i mu t_j) expm1(z_j) / z_j,  z_j = (s_j + i mu) h_j.
    Only rounding error remains; the precision is raised until the balls
    carry ``digits``."""
    mus = as_fractions(mus)
    depth = 0.0
    prec = precision_bits(depth, digits, 1.0, 64)
    tol = mpmath.mpf(10) ** (-(digits + 2))
    while True:
        values, log_z0 = [], []
        with ctx.workprec(prec):
            for model in models:
                t, v = model.knots, model.values
                shift = float(np.max(v))
                seg = []
                for j in range(len(t) - 1):
                    h = arb(float(t[j + 1])) - arb(float(t[j]))
                    s = (arb(float(v[j + 1])) - arb(float(v[j]))) / h
                    seg.append((arb(float(t[j])), h, s, (arb(float(v[j])) - shift).exp()))

                def z_of(mu):
                    m = _arb(mu)
                    total = acb(0)
                    for t0, h, s, e in seg:
                        z = acb(s, m) * h
                        factor = h if (s == 0 and mu == 0) else z.expm1() / z * h
                        total += e * _exp_i(m * t0) * factor
                    return total

                z0 = z_of(Fraction(0))
                log_z0.append(shift + float(z0.real.log().mid()))
                values.append([z_of(mu) / z0 for mu in mus])
        rel = [max(_relative_radius(row[k]) for row in values) for k in range(len(mus))]
        worst = max(rel)
        if worst <= tol or prec >= MAX_PREC:
            break
        if worst == mpmath.inf or worst >= 1:
            prec = min(MAX_PREC, 2 * prec)
        else:
            prec = min(MAX_PREC, int(prec + float(mpmath.log(worst / tol, 2)) + 32))
    quad = [[upper(acb(z.real.rad(), z.imag.rad())) for z in row] for row in values]
    return Transform(values=values, quad_err=quad, log_z0=log_z0,
                     resolved=[r <= tol for r in rel], prec=prec, nodes=0,
                     method="exact-segments", mus=mus)
