"""Gauss-Legendre sums along a planned path (:mod:`signfree.engine.paths`) in
Arb ball arithmetic (Johansson, IEEE Trans. Computers 2017, via python-flint).

Each panel of the path carries its own Gauss-Legendre rule; the nodes x_j are
complex window coordinates. The model values p_r(x_j) are one matrix product
of the coefficients with T_k(x_j) = (w^k + w^-k) / 2, w = x + sqrt(x^2 - 1)
(Mason & Handscomb, Chebyshev Polynomials, 1.4); the weights
W[r, j] = dq_j exp(p_r(x_j) - shift_r); and Z = W E with
E[j, k] = exp(i mu_k q_j), factorised on an even mu grid, as real ball matrix
products of the real and imaginary parts. For an even model only half the
path is walked and Z is twice the real part.
"""
import math

import mpmath
import numpy as np
from flint import acb, arb, arb_mat, ctx

from signfree.engine.balls import (GUARD_DIGITS, LOG2_10, MAX_NODES, MAX_PREC, abs_mid, arb_of,
                                   difference, relative_radius, uniform_step, upper)
from signfree.engine.rules import gauss_legendre

_SMALL = 16


def panel_count(n):
    """The smallest node count >= n on the ladder 8, 10, 12, 15, ... (each
    about 1.25 times the last), so that rules are shared between panels."""
    m = 8
    while m < n:
        m = m + max(2, m // 4)
    return m


def path_nodes(path, scale, prec):
    """(window nodes x_j, weights dx_j) of the path with every panel's node
    count multiplied by ``scale``, at ``prec`` bits. The nodes are exact
    numbers (the midpoints of Arb's enclosures of the Gauss-Legendre nodes,
    mapped onto the panel); the weights are balls. The rule so defined
    differs from the exact Gauss-Legendre rule by far less than the
    quadrature error, which the refinement check measures for the rules
    actually used."""
    xs, ws = [], []
    with ctx.workprec(prec + 16):
        for pnl in path.panels:
            m = panel_count(math.ceil(pnl.nodes * scale))
            us, wu = gauss_legendre(m, prec)
            s, e = acb(pnl.start), acb(pnl.end)
            c, h = (s + e) / 2, (e - s) / 2
            for u in us:
                x = c + h * u.mid()
                xs.append(acb(x.real.mid(), x.imag.mid()))
            ws.extend(h * w for w in wu)
    return xs, ws


def chebyshev_table(xs, degree, prec):
    """T_k(x_j), k <= degree, at exact complex nodes x_j, as (re, im)
    arb_mat of shape (degree + 1) x n: T_k = (w^k + w^-k) / 2 with powers
    taken degree/2 + 32 bits above ``prec`` (rectangular complex balls may
    widen by up to sqrt 2 per product)."""
    n = len(xs)
    re = [[arb(1)] * n] + [[None] * n for _ in range(degree)]
    im = [[arb(0)] * n] + [[arb(0)] * n for _ in range(degree)]
    with ctx.workprec(prec + degree // 2 + 32):
        for j, x in enumerate(xs):
            w = x + (x - 1).sqrt() * (x + 1).sqrt()
            if x.imag == 0:
                # real x in [-1, 1]: |w| = 1 and T_k(x) = Re w^k exactly (imaginary part 0)
                a = w
                for k in range(1, degree + 1):
                    re[k][j] = a.real
                    a = a * w
                continue
            wi = 1 / w
            a, b = w, wi
            for k in range(1, degree + 1):
                t = (a + b) / 2
                re[k][j], im[k][j] = t.real, t.imag
                a, b = a * w, b * wi
    with ctx.workprec(prec):
        return arb_mat(re), arb_mat(im)


def _powers(start, step, count):
    out = [start]
    for _ in range(count - 1):
        out.append(out[-1] * step)
    return out


def _cmul(ar, ai, br, bi, real_only):
    """(ar + i ai)(br + i bi) for arb_mat pairs (``ai`` None: a real left
    factor); (re, None) when only the real part is wanted."""
    if ai is None:
        return ar * br, (None if real_only else ar * bi)
    re = ar * br - ai * bi
    return re, (None if real_only else ar * bi + ai * br)


def _parts(rows, real):
    """(real part, imaginary part or None) of a list of acb rows as arb_mat."""
    return (arb_mat([[z.real for z in row] for row in rows]),
            None if real else arb_mat([[z.imag for z in row] for row in rows]))


def fourier_sums(W, qs, mus, real_only, real_weights=False):
    """sum_j W[r][j] exp(i mu_k q_j) for complex weights and nodes, as rows
    of acb (``real_weights``: W and q real, on the real axis). On an even
    mu grid the exponentials factorise,
    exp(i mu_{aB+b} q) = exp(i (mu_0 + a B h) q) exp(i b h q)."""
    R, K, n = len(W), len(mus), len(qs)
    h = uniform_step(mus)
    iq = [acb(0, 1) * q for q in qs]
    if h is not None and K >= _SMALL:
        B = math.isqrt(K - 1) + 1
        A = -(-K // B)
        G = [_powers((arb_of(mus[0]) * z).exp(), (arb_of(B * h) * z).exp(), A) for z in iq]
        F = [_powers(acb(1), (arb_of(h) * z).exp(), B) for z in iq]
        if R * A < K:
            M = [[W[r][j] * G[j][i] for j in range(n)] for r in range(R) for i in range(A)]
            re, im = _cmul(*_parts(M, False), *_parts(F, False), real_only)
            return [[acb(re[r * A + k // B, k % B],
                         0 if im is None else im[r * A + k // B, k % B]) for k in range(K)]
                    for r in range(R)]
        E = [[g * f for g in G[j] for f in F[j]][:K] for j in range(n)]
    else:
        E = [[(arb_of(m) * z).exp() for m in mus] for z in iq]
    re, im = _cmul(*_parts(W, real_weights), *_parts(E, False), real_only)
    return [[acb(re[r, k], 0 if im is None else im[r, k]) for k in range(K)] for r in range(R)]


def path_sums(coef_rows, domain, path, mus, prec, scale, shifts, grad_ks=()):
    """Int over the path of exp(p_r(q) - shift_r + i mu_k q) dq for every
    coefficient row r and mu_k, followed by one row per k in ``grad_ks``
    holding Int T_k(x) exp(p_0 - shift_0 + i mu q) dq; plus, per mu, log10
    of max_j |integrand_j| for row 0 (the size the sum cancels from) and the
    total node count."""
    degree = max([len(c) for c in coef_rows] + [max(grad_ks, default=0) + 1]) - 1
    xs, wx = path_nodes(path, scale, prec)
    n = len(xs)
    Tre, Tim = chebyshev_table(xs, degree, prec)
    with ctx.workprec(prec):
        cm = arb_mat([[arb(float(c)) for c in row] + [arb(0)] * (degree + 1 - len(row))
                      for row in coef_rows])
        Pre, Pim = cm * Tre, cm * Tim
        a, b = arb(domain[0]), arb(domain[1])
        half, mid = (b - a) / 2, (a + b) / 2
        qs = [mid + half * x for x in xs]
        dq = [half * w for w in wx]
        W = []
        real = path.height == 0          # real nodes, real weights
        for r in range(len(coef_rows)):
            s = arb(shifts[r])
            if real:
                W.append([acb(dq[j].real * (Pre[r, j] - s).exp()) for j in range(n)])
            else:
                W.append([dq[j] * acb(Pre[r, j] - s, Pim[r, j]).exp() for j in range(n)])
        for k in grad_ks:
            W.append([W[0][j] * acb(Tre[k, j], Tim[k, j]) for j in range(n)])
        Z = fourier_sums(W, qs, mus, path.half, real_weights=real)
        if path.half:
            Z = [[2 * z for z in row] for row in Z]
    logw = np.array([_log10_abs(w) for w in W[0]])
    imq = np.array([float(q.imag.mid()) for q in qs])
    mf = np.array([float(m) for m in mus])
    peak = (logw[None, :] - np.outer(mf, imq) / math.log(10)).max(axis=1)
    return Z, peak, n


def _log10_abs(z):
    m = abs(z).mid()
    if m == 0:
        return -math.inf
    man, exp = m.man_exp()
    return math.log10(int(man)) + int(exp) * math.log10(2)


def _radius(z):
    return upper(acb(z.real.rad(), z.imag.rad()))


class RidingRowsCancel(ArithmeticError):
    """Rows that ride along (replicas) would need far more precision on the
    central row's path than the central row itself."""


REPLICA_BITS_LIMIT = 1024


def _worst(ratios, k, check_rows, tol, own_only=False):
    """The largest radius at mu_k relative to |value| (checked rows) or to
    |row 0| (the other rows, which need row 0's absolute accuracy); the
    other rows are compared in ball arithmetic first and measured only when
    one of them is not below tol / 10 of |row 0|."""
    bits = min(ratios[r][k].rel_accuracy_bits() for r in range(check_rows))
    top = mpmath.mpf(2) ** (-bits) if bits < 2 ** 30 else mpmath.mpf(0)
    if own_only:
        return top
    z0 = ratios[0][k]
    with ctx.workprec(64):
        limit = (abs(z0).mid() * arb(mpmath.nstr(tol / 20, 5))).mid()
        fine = all(z.real.rad() + z.imag.rad() < limit
                   for z in (ratios[r][k] for r in range(check_rows, len(ratios))))
    if fine:
        return top
    scale = abs_mid(z0)
    rest = [_radius(ratios[r][k]) / scale if scale > 0 else mpmath.inf
            for r in range(check_rows, len(ratios))]
    return max([top] + rest)


def _row_shifts(coef_rows):
    """max p_r on [-1, 1] per row (double; any value works, the same one
    enters numerator and denominator)."""
    from numpy.polynomial import chebyshev as C
    x = np.cos(np.linspace(0, np.pi, 1025))
    return [float(C.chebval(x, row).max()) for row in coef_rows]


def _start_prec(group, digits, nodes):
    bits = (digits + GUARD_DIGITS) * LOG2_10 + max(max(group.log_ratio), 0.0) / math.log(2)
    bits += group.magnitude_bits + math.log2(nodes + 1.0) + 16
    return int(min(MAX_PREC, math.ceil(bits / 64.0) * 64))


def _raise(prec, worst, tol):
    extra = 2 * prec if worst == mpmath.inf or worst >= 1 else \
        prec + float(mpmath.log(worst * 10 / tol, 2)) + 32
    return min(MAX_PREC, int(math.ceil(extra / 64) * 64))


def _bound(coef, path, domain, mus, scale, shift, z0):
    """The Bernstein-ellipse bound of the quadrature error at every mu
    (:func:`signfree.engine.paths.quadrature_bound`) relative to Z(0), as
    mpf; doubled for a half path (Z is twice its real part)."""
    from signfree.engine.paths import quadrature_bound
    half = 0.5 * (float(domain[1]) - float(domain[0]))
    counts = [panel_count(math.ceil(p.nodes * scale)) for p in path.panels]
    logs = quadrature_bound(coef, path, half, [float(m) for m in mus], counts)
    base = mpmath.log(abs_mid(z0)) + shift
    factor = 2 if path.half else 1
    return [factor * mpmath.exp(mpmath.mpf(float(b)) - base) if np.isfinite(b) else mpmath.inf
            for b in logs]


def path_transform(coef_rows, domain, mus, groups, normaliser, digits, check_rows, grad_ks):
    """Z(mu)/Z(0) along the planned paths (``groups`` from
    :func:`signfree.engine.paths.plan`, ``normaliser`` the real-axis group
    planned for mu = 0). Per group the precision is raised until the balls
    of the first ``check_rows`` rows carry ``digits`` and the node scale
    until the sums of row 0 with 1 and 1.5 times the nodes agree at every mu
    of the group. Returns a dict of the Transform fields."""
    K = len(mus)
    tol = mpmath.mpf(10) ** (-(digits + 1))
    shifts = _row_shifts(coef_rows)
    R, G = len(coef_rows), len(grad_ks)
    # Z(0) per row on the real axis (no cancellation), refined to tol / 10
    prec0 = _start_prec(normaliser, digits, 64)
    scale = 1.0
    while True:
        z0s, _, n0 = path_sums(coef_rows, domain, normaliser.path, [0], prec0, scale, shifts,
                               grad_ks)
        z0f, _, n0f = path_sums(coef_rows[:1], domain, normaliser.path, [0], prec0, 1.5 * scale,
                                shifts)
        z0, fine0 = [row[0] for row in z0s], z0f[0][0]
        err = upper(difference(z0[0], fine0))
        rel = max(relative_radius(z0[r]) for r in range(check_rows))
        if rel > tol / 100 and prec0 < MAX_PREC:
            prec0 = _raise(prec0, rel * 10, tol)
            continue
        if err <= tol / 10 ** 6 * abs_mid(z0[0]) or n0f > MAX_NODES:
            break
        scale *= 1.5
    with ctx.workprec(prec0):
        grad0 = [z0[R + i] / z0[0] for i in range(G)]
    bound0 = _bound(coef_rows[0], normaliser.path, domain, [0], scale, shifts[0], z0[0])[0]
    log_z0 = [shifts[r] + float(z0[r].real.log().mid()) for r in range(R)]
    values = [[None] * K for _ in range(R + G)]
    quad = [[None] * K for _ in range(R)]
    resolved, heights, orders = [False] * K, [0.0] * K, [None] * K
    precs, nodes = [prec0], [n0]
    want = float(-mpmath.log(tol / 10, 2))
    half = 0.5 * (float(domain[1]) - float(domain[0]))
    for g in groups:
        ms = mus[g.lo:g.hi]
        est = sum(p.nodes for p in g.path.panels)
        prec, scale = _start_prec(g, digits, est), 1.0
        while True:
            Z, peak, n = path_sums(coef_rows, domain, g.path, ms, prec, scale, shifts, grad_ks)
            with ctx.workprec(prec):
                ratios = [[z / (z0[r] if r < R else z0[0]) for z in Z[r]]
                          for r in range(R + G)]
            # rows past check_rows (replicas) need the absolute accuracy of row 0
            worst = max(_worst(ratios, k, check_rows, tol) for k in range(len(ms)))
            if worst > tol / 10 and prec < MAX_PREC:
                own = max(_worst(ratios, k, check_rows, tol, own_only=True)
                          for k in range(len(ms)))
                if own <= tol / 10 and _raise(prec, worst, tol) > REPLICA_BITS_LIMIT:
                    # a replica whose saddle lies far from the central one's
                    # cancels heavily on this path: the caller takes the
                    # real axis instead
                    raise RidingRowsCancel()
                prec = _raise(prec, worst, tol)
                continue
            Zf, _, nf = path_sums(coef_rows[:1], domain, g.path, ms, prec, 1.5 * scale, shifts)
            with ctx.workprec(prec):
                fine = [z / fine0 for z in Zf[0]]
            diffs = [upper(difference(v, f)) for v, f in zip(ratios[0], fine)]
            if all(d <= tol * abs_mid(v) for d, v in zip(diffs, ratios[0])) or nf > MAX_NODES:
                break
            scale *= 1.5
        precs.append(prec)
        nodes.append(n)
        bounds = _bound(coef_rows[0], g.path, domain, ms, scale, shifts[0], z0[0])
        for i, k in enumerate(range(g.lo, g.hi)):
            for r in range(R + G):
                values[r][k] = ratios[r][i]
            mag = abs_mid(ratios[0][i])
            rad_ok = min(ratios[r][i].rel_accuracy_bits() for r in range(check_rows)) >= want
            resolved[k] = rad_ok and diffs[i] <= tol * mag
            for r in range(check_rows):
                # twice the disagreement (the 1.5 n rule's own error is not zero
                # where panels are not yet in the asymptotic regime), plus the
                # Bernstein-ellipse bounds of the rules for Z(mu) and for Z(0)
                z = ratios[r][i]
                quad[r][k] = 2 * diffs[i] + bounds[i] + bound0 * mag \
                    + upper(acb(z.real.rad(), z.imag.rad()))
            heights[k] = g.path.height * half
            orders[k] = float(peak[i] - _log10_abs(Z[0][i]))
    grad = ([values[R + i] for i in range(G)], grad0) if G else None
    return dict(values=values[:R], quad_err=quad, log_z0=log_z0, resolved=resolved,
                prec=max(precs), nodes=max(nodes), method="gauss-legendre-path", mus=mus,
                gradient=grad, heights=heights, path_orders=orders)
