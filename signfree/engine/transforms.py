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
from dataclasses import dataclass

import mpmath
import numpy as np
from flint import acb, acb_mat, arb, arb_mat, ctx

from signfree import progress
from signfree.engine.balls import (MAX_NODES, MAX_PREC, abs_mid, arb_of as _arb, as_fractions,
                                   difference, exp_i as _exp_i, precision_bits,
                                   relative_radius as _relative_radius, uniform_step, upper)
from signfree.engine.rules import chebyshev_matrix, gauss_legendre, on_ladder as _on_ladder


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
    heights    per mu: Im q of the horizontal part of the path of integration
               (0: the real axis); None for routes without quadrature
    path_orders  per mu: log10 of the largest term of the quadrature sum over
               |Z(mu)| (row 0, measured on a shifted path; on the real axis
               the cancellation depth, an upper bound): the orders the sum
               cancels over
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
    heights: list = None
    path_orders: list = None


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


def _shifted(models, rows, domain, mus, digits, var, check_rows, gradient, certify):
    """(the transform along paths through the saddle, None) or, when the
    real axis is the best path for every mu, (None, the planned real-axis
    cancellation per mu in decimal orders, or None when the scan is too
    shallow for a shifted path to gain: Gaussian depth estimate below the
    allowance)."""
    from signfree.engine import path_sums, paths
    top = max(float(m) ** 2 for m in mus) * var / (2 * math.log(10))
    if top * math.log(10) <= paths.ALLOWANCE:
        return None, None
    even = _is_even(rows, domain)
    mf = [float(m) for m in mus]
    groups = paths.plan(models[0].coef, domain, mf, digits, even)
    if all(g.path.height == 0 for g in groups):
        return None, [max(r, 0.0) / math.log(10) for g in groups for r in g.log_ratio]
    normaliser = paths.plan(models[0].coef, domain, [0.0], digits, even, force_real=True)[0]
    try:
        out = path_sums.path_transform(rows, domain, mus, groups, normaliser, digits,
                                       check_rows, tuple(gradient))
    except path_sums.RidingRowsCancel:
        # replicas far from the central model: every row on the real axis
        return None, [max(r, 0.0) / math.log(10) for g in groups for r in g.log_ratio]
    tr = Transform(**out)
    if certify:
        from signfree.engine.certification import certified as _certified
        cert, cert_quad, cert_ok = _certified(models[:check_rows], mus, digits, tr.values,
                                              tr.prec, groups=groups)
        tr.values = cert + tr.values[check_rows:]
        tr.quad_err = cert_quad + tr.quad_err[check_rows:]
        tr.resolved = [a and b for a, b in zip(tr.resolved, cert_ok)]
        tr.method = "acb.integral-path"
    return tr, None


def chebyshev_transform(models, mus, digits=12, certify=False, check_rows=None,
                        gradient=(), path="auto"):
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
    Z_0(0), the same at mu = 0).

    ``path``: 'auto' integrates each mu along the path with the smallest
    cancellation (:mod:`signfree.engine.paths`; the real axis where no
    shifted line does better), 'real' along the real axis only."""
    mus = as_fractions(mus)
    K = len(mus)
    domain = models[0].domain
    if any(m.domain != domain for m in models):
        raise ValueError("models in one batch must share their domain")
    if path not in ("auto", "real"):
        raise ValueError(f"path must be 'auto' or 'real', got {path!r}")
    width = max(len(m.coef) for m in models)
    rows = [list(m.coef) + [0.0] * (width - len(m.coef)) for m in models]
    check_rows = len(models) if check_rows is None else check_rows
    var, pmax = _model_profile(models[0].coef, domain)
    if path == "auto":
        shifted, planned = _shifted(models, rows, domain, mus, digits, var, check_rows,
                                    gradient, certify)
        if shifted is not None:
            return shifted
    else:
        planned = None
    half = 0.5 * (domain[1] - domain[0])
    degree = max(len(c) for c in rows) - 1
    # the cancellation depth: from the path plan where one was made (it sees
    # several peaks), else the Gaussian estimate from the variance
    depths = planned or [float(m) ** 2 * var / (2 * math.log(10)) for m in mus]
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

        progress.report("integrating", detail=f"{K} mu, {n} nodes, {max(precs)} bits")
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
        from signfree.engine.certification import certified as _certified
        cert, cert_quad, cert_ok = _certified(models[:check_rows], mus, digits, values, prec)
        values = cert + values[check_rows:]
        quad = cert_quad + quad[check_rows:]
        resolved = [a and b for a, b in zip(resolved, cert_ok)]
        method = "acb.integral"
    else:
        method = "gauss-legendre"
    # on the real axis every term is at most Z(0): the sum cancels over at most the depth
    orders = [float(-mpmath.log10(abs_mid(z))) if abs_mid(z) > 0 else math.inf
              for z in values[0]]
    return Transform(values=values, quad_err=quad, log_z0=log_z0, resolved=resolved,
                     prec=prec, nodes=n, method=method, mus=mus, gradient=grad,
                     heights=[0.0] * K, path_orders=orders)

