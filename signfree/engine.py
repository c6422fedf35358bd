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
import math
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache

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
    """The smallest node count >= n on the ladder 32 * 1.5^k, so that node
    sets (and their cache) are shared between calls and each refinement step
    is a factor of about 1.5."""
    m = 32
    while m < n:
        m = (3 * m + 1) // 2
    return m


def precision_bits(depth, digits, magnitude=1.0, nodes=64):
    """Working precision for a cancellation depth (decimal orders), wanted
    digits, the size of the exponent p and the number of summed terms."""
    bits = (max(depth, 0.0) + digits + GUARD_DIGITS) * LOG2_10
    bits += math.log2(abs(magnitude) + 2.0) + math.log2(nodes + 1.0) + 16
    return int(min(MAX_PREC, math.ceil(bits / 64.0) * 64))


@lru_cache(maxsize=32)
def gauss_legendre(n, prec):
    """Nodes and weights of the n-point Gauss-Legendre rule on [-1, 1] at
    ``prec`` bits (Arb's arb_hypgeom_legendre_p_ui_root)."""
    with ctx.workprec(prec + 16):
        half = [arb.legendre_p_root(n, k, weight=True) for k in range((n + 1) // 2)]
    xs = [x for x, _ in half] + [-x for x, _ in reversed(half[: n // 2])]
    ws = [w for _, w in half] + [w for _, w in reversed(half[: n // 2])]
    return tuple(xs), tuple(ws)


@lru_cache(maxsize=32)
def chebyshev_matrix(n, prec, degree):
    """T_k(x_j) for k <= degree at the n Gauss-Legendre nodes, as arb_mat."""
    xs, _ = gauss_legendre(n, prec)
    with ctx.workprec(prec):
        rows = [[arb(1)] * n, list(xs)]
        for _ in range(2, degree + 1):
            rows.append([2 * x * t1 - t0 for x, t1, t0 in zip(xs, rows[-1], rows[-2])])
        return arb_mat(rows[: degree + 1])


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


def _gl_pass(coef_rows, domain, mus, prec, n, grad_ks=()):
    """One Gauss-Legendre evaluation at n nodes and prec bits.

    Returns (ratios, log_z0, grad0): ratios[r][k] = Z_r(mu_k) / Z_r(0) as acb
    for every coefficient row, followed by one row per k in ``grad_ks`` holding
    Int T_k(x) exp(p_0 + i mu q) dq / Z_0(0) (the derivative of Z_0 with
    respect to c_k); grad0[k] is the same at mu = 0."""
    degree = max([len(c) for c in coef_rows] + [max(grad_ks, default=0) + 1]) - 1
    R, K = len(coef_rows), len(mus)
    with ctx.workprec(prec):
        xs, ws = gauss_legendre(n, prec)
        T = chebyshev_matrix(n, prec, degree)
        cm = arb_mat([[arb(float(c)) for c in row] + [arb(0)] * (degree + 1 - len(row))
                      for row in coef_rows])
        P = cm * T
        a, b = arb(domain[0]), arb(domain[1])
        half, mid = (b - a) / 2, (a + b) / 2
        qs = [mid + half * x for x in xs]
        W, z0, log_z0 = [], [], []
        for r in range(R):
            row = [P[r, j] for j in range(n)]
            shift = arb(max(float(v.mid()) for v in row))
            wr = [w * (v - shift).exp() for w, v in zip(ws, row)]
            s = sum(wr, arb(0))
            W.append(wr)
            z0.append(s)
            log_z0.append(float(shift.mid()) + float((s * half).log().mid()))
        grad0 = []
        for k in grad_ks:
            W.append([w * T[k, j] for j, w in enumerate(W[0])])
            z0.append(z0[0])
            grad0.append(sum(W[-1], arb(0)) / z0[0])
        Z = _fourier_rows(W, qs, mus)
        ratios = [[Z[r][k] / z0[r] for k in range(K)] for r in range(len(W))]
    return ratios, log_z0, grad0


def _fourier_rows(W, qs, mus):
    """sum_j W[r][j] exp(i mu_k q_j) for every row r and mu_k, as matrix
    products. On an even mu grid with few rows, exp(i mu q) factorises
    (G F, see the module docstring); otherwise E = exp(i mu q) is built
    (by rotation on an even grid) and multiplied as two real matrices."""
    R, K, n = len(W), len(mus), len(qs)
    h = uniform_step(mus)
    if h is not None and K >= 16:
        B = math.isqrt(K - 1) + 1
        A = -(-K // B)
        G = [_powers(_exp_i(_arb(mus[0]) * q), _exp_i(_arb(B * h) * q), A) for q in qs]
        F = [_powers(acb(1), _exp_i(_arb(h) * q), B) for q in qs]
        if R * A < K:
            M = acb_mat([[W[r][j] * G[j][i] for j in range(n)] for r in range(R) for i in range(A)])
            Zm = M * acb_mat(F)
            return [[Zm[r * A + k // B, k % B] for k in range(K)] for r in range(R)]
        E = [[g * f for g in G[j] for f in F[j]][:K] for j in range(n)]
    else:
        mus_arb = [_arb(m) for m in mus]
        E = [[_exp_i(m * q) for m in mus_arb] for q in qs]
    Wm = arb_mat(W)
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


def chebyshev_transform(models, mus, digits=12, certify=False, check_rows=None,
                        gradient=()):
    """Z(mu)/Z(0) for Chebyshev models sharing one domain, with the working
    precision raised from the cancellation depth and the node count raised
    until an n- and a 1.5 n-point rule agree to ``digits``. A mu whose
    digits cannot be reached within MAX_PREC bits and MAX_NODES nodes is
    marked unresolved (its value and quad_err still tell what was reached).

    Only the first ``check_rows`` models (default: all) steer the precision
    and node count; the rest (replicas) are evaluated once with the rule so
    found, and their quad_err is not estimated (None). ``gradient`` lists
    coefficient indices k whose derivatives dZ_0/dc_k are wanted: they come
    back in ``Transform.gradient`` as (rows over k of Int T_k exp(p_0 + i mu q)
    / Z_0(0), the same at mu = 0)."""
    mus = as_fractions(mus)
    domain = models[0].domain
    if any(m.domain != domain for m in models):
        raise ValueError("models in one batch must share their domain")
    all_rows = [list(m.coef) for m in models]
    check_rows = len(models) if check_rows is None else check_rows
    coef_rows = all_rows[:check_rows]
    var, pmax = _model_profile(models[0].coef, domain)
    half = 0.5 * (domain[1] - domain[0])
    mu_max = max(abs(float(m)) for m in mus)
    depth = max(float(m) ** 2 * var / (2 * math.log(10)) for m in mus)
    degree = max(len(c) for c in all_rows) - 1
    # starting node count: the oscillation (mu half-range radians), the
    # degree, and the width of the peak of rho in window units; the
    # refinement loop below raises it where this is not enough
    n = _on_ladder(24 + 0.6 * degree + 0.7 * mu_max * half
                   + 0.5 * math.sqrt(2.3 * (depth + digits + 5) / max(var, 1e-300)) * half)
    prec = precision_bits(depth, digits, pmax, n)
    tol = mpmath.mpf(10) ** (-(digits + 1))
    done = {}

    def gl(nodes):
        if (nodes, prec) not in done:
            done[nodes, prec] = _gl_pass(coef_rows, domain, mus, prec, nodes)[:2]
        return done[nodes, prec]

    while True:
        n1 = _on_ladder(n + 1)
        z_n, _ = gl(n)
        z_n1, log_z0 = gl(n1)
        quad = [[upper(z_n[r][k] - z_n1[r][k]) for k in range(len(mus))]
                for r in range(check_rows)]
        need_prec, need_nodes = prec, False
        resolved = []
        for k in range(len(mus)):
            ok = True
            for r in range(check_rows):
                z = z_n1[r][k]
                rel_rad = _relative_radius(z)
                if rel_rad > tol / 10:
                    ok = False
                    if rel_rad == mpmath.inf or rel_rad >= 1:
                        need_prec = max(need_prec, 2 * prec)
                    else:
                        extra = float(mpmath.log(rel_rad * 10 / tol, 2))
                        need_prec = max(need_prec, int(math.ceil((prec + extra + 32) / 64) * 64))
                elif quad[r][k] > tol * abs_mid(z):
                    ok, need_nodes = False, True
            resolved.append(ok)
        if all(resolved):
            break
        if need_prec > prec:
            prec = need_prec
        elif need_nodes:
            n = n1
        if prec > MAX_PREC or n > MAX_NODES:
            break
    for r in range(check_rows):
        for k in range(len(mus)):
            quad[r][k] += upper(acb(z_n1[r][k].real.rad(), z_n1[r][k].imag.rad()))
    grad = None
    if len(all_rows) > check_rows or gradient:
        prec = min(prec, MAX_PREC)
        rest, rest_log, grad0 = _gl_pass(all_rows[check_rows:] or all_rows[:1], domain, mus,
                                         prec, n1, grad_ks=tuple(gradient))
        extra = len(all_rows) - check_rows
        z_n1 = z_n1 + rest[:extra]
        log_z0 = log_z0 + rest_log[:extra]
        quad = quad + [[None] * len(mus) for _ in range(extra)]
        if gradient:
            # gradient rows are relative to the first row of that pass
            if extra:
                raise ValueError("ask for gradients and replicas in separate calls")
            grad = (rest[1:], grad0)
    if certify:
        cert, cert_quad, cert_ok = _certified(models[:check_rows], mus, digits, z_n1, prec)
        z_n1 = cert + z_n1[check_rows:]
        quad = cert_quad + quad[check_rows:]
        resolved = [a and b for a, b in zip(resolved, cert_ok)]
        method = "acb.integral"
    else:
        method = "gauss-legendre"
    return Transform(values=z_n1, quad_err=quad, log_z0=log_z0, resolved=resolved,
                     prec=min(prec, MAX_PREC), nodes=n1, method=method, mus=mus, gradient=grad)


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
