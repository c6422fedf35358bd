"""Exact sums over a charge lattice, in Arb ball arithmetic (Johansson, IEEE
Trans. Computers 2017, through python-flint):

    Z(theta)/Z(0) = sum_j P_j exp(i theta Q_j) / sum_j P_j,  Q_j = start + step j.

There is no quadrature: with z = exp(i theta step) the sum is
exp(i theta start) times the polynomial sum_j P_j z^j, so only rounding error
remains, and the balls bound it. The precision follows the sum's own
cancellation: every theta starts from an estimate and is raised, on its own,
until its ball carries the wanted digits (the radius tells how many orders
cancelled). The sum is periodic in theta with period 2 pi / step up to the
phase exp(2 pi i start / step).

Batch layout as in the integral engine: the weights W[r, j] = P_r(Q_j) of
every model of a batch (central model, neighbours, replicas) at the lattice
points, then either each row as a polynomial evaluated by Horner's rule at
z_k (few rows) or one matrix product W E with E[j, k] = exp(i theta_k Q_j)
built by rotation (|z| = 1, so the ball radii grow only linearly).
Smoothed models give ln P_j as one matrix product of their Chebyshev
coefficients with T_k(x_j) at the lattice points (x_j in the window
[-1, 1]), computed as Re w^k with w = x + i sqrt(1 - x^2).
"""
import math
from fractions import Fraction

import mpmath
import numpy as np
from flint import acb, acb_poly, arb, arb_mat, ctx, fmpq

from signfree.engine.balls import (GUARD_DIGITS, LOG2_10, MAX_PREC, arb_of, as_fractions,
                                   exp_i, relative_radius, upper)
from signfree.engine.transforms import Transform

START_DEPTH_CAP = 600       # decimal orders: deeper sums are found by raising
POLY_ROWS = 4               # batches with at most this many rows use Horner's rule


def _ladder(bits):
    """Precisions on the ladder 128 * 1.25^k (multiples of 64), so that
    thetas of similar depth share one pass."""
    p = 128
    while p < bits:
        p = int(math.ceil(p * 1.25 / 64)) * 64
    return min(p, MAX_PREC)


def _fraction(x):
    return arb(fmpq(x.numerator, x.denominator))


_TABLES = {}


def chebyshev_table(lattice, domain, degree, prec):
    """T_k(x_j), k <= degree, at the lattice points mapped to the window of
    ``domain``, as an arb_mat (degree + 1) x count. The powers of
    w = x + i sqrt(1 - x^2) are taken degree/2 + 32 bits above prec (each
    power of a rectangular complex ball can widen it by up to sqrt 2)."""
    key = (lattice, domain, degree, prec)
    if key not in _TABLES:
        a, b = (Fraction(float(v)) for v in domain)
        xs = [(2 * lattice.charge(j) - a - b) / (b - a) for j in range(lattice.count)]
        with ctx.workprec(prec + degree // 2 + 32):
            steps = []
            for x in xs:
                xa = _fraction(x)
                steps.append(acb(xa, ((1 - xa) * (1 + xa)).max(arb(0)).sqrt()))
            powers, table = list(steps), [[arb(1)] * len(xs)]
            for _ in range(degree):
                table.append([z.real for z in powers])
                powers = [z * s for z, s in zip(powers, steps)]
        with ctx.workprec(prec):
            T = arb_mat([[+v for v in row] for row in table])
        if len(_TABLES) > 16:
            _TABLES.pop(next(iter(_TABLES)))
        _TABLES[key] = T
    return _TABLES[key]


def lattice_weights(models, prec, gradient=()):
    """(rows, shifts): P_r(Q_j) exp(-shift_r) as arb balls at ``prec`` bits
    for every model, followed by one row T_k(x_j) P_0(Q_j) exp(-shift_0) per
    k in ``gradient`` (derivatives of model 0's weights by its Chebyshev
    coefficient c_k). A smoothed model's ln P is exact for its coefficients;
    direct models hold exact numbers."""
    lattice = models[0].lattice
    rows, shifts = [], []
    smooth = [m for m in models if m.base is not None]
    T = None
    if smooth or gradient:
        degree = max([m.base.degree for m in smooth] + [max(gradient, default=0)])
        T = chebyshev_table(lattice, models[0].base.domain if models[0].base is not None
                            else smooth[0].base.domain, degree, prec)
    with ctx.workprec(prec):
        P = None
        if smooth:
            width = T.nrows()
            cm = arb_mat([[arb(float(c)) for c in m.base.coef]
                          + [arb(0)] * (width - len(m.base.coef)) for m in smooth])
            P = cm * T
        i = 0
        for m in models:
            if m.base is not None:
                vals = [P[i, j] for j in range(lattice.count)]
                i += 1
                shift = max(float(v.mid()) for v in vals)
                rows.append([(v - shift).exp() for v in vals])
            elif m.counts is not None:
                rows.append([_fraction(c) for c in m.counts])
                shift = 0.0
            else:
                finite = [float(v) for v in m.log_values if v is not None]
                shift = max(finite)
                rows.append([arb(0) if v is None else (_fraction(v) - shift).exp()
                             for v in m.log_values])
            shifts.append(shift)
        for k in gradient:
            rows.append([T[k, j] * w for j, w in enumerate(rows[0])])
    return rows, shifts


def _negligible(rows, prec):
    """Per index j: True when the weight lies below 2^-(prec + 16) of its
    row's largest in every row."""
    cut = 2.0 ** -(prec + 16)
    mags = [[float(w.abs_upper()) for w in r] for r in rows]
    tops = [max(m) or 1.0 for m in mags]
    return [all(m[j] <= cut * t for m, t in zip(mags, tops)) for j in range(len(rows[0]))]


def _evaluate(rows, lattice, mus, prec):
    """sum_j rows[r][j] exp(i mu_k Q_j) for every row and mu (acb), with the
    weights below 2^-(prec + 16) of their rows left out and their total
    added to the radius (a rigorous bound: |exp(i mu Q)| = 1)."""
    small = _negligible(rows, prec)
    keep = [j for j, s in enumerate(small) if not s] or [0]
    j0, j1 = keep[0], keep[-1] + 1
    with ctx.workprec(prec):
        left = [sum((w for w, s in zip(r, small) if s), arb(0)) for r in rows]
        W = [[arb(0) if small[j] else +r[j] for j in range(j0, j1)] for r in rows]
        q0 = _fraction(lattice.charge(j0))
        s = _fraction(lattice.step)
        mus_arb = [arb_of(m) for m in mus]
        phase = [exp_i(m * q0) for m in mus_arb]
        zs = [exp_i(m * s) for m in mus_arb]
        if len(rows) <= POLY_ROWS:
            out = []
            for r in range(len(rows)):
                poly = acb_poly(W[r])
                out.append([ph * poly(z) for ph, z in zip(phase, zs)])
        else:
            n = j1 - j0
            cols = []
            for ph, z in zip(phase, zs):
                col, e = [], ph
                for _ in range(n):
                    col.append(e)
                    e = e * z
                cols.append(col)
            Wm = arb_mat(W)
            re = Wm * arb_mat([[cols[k][j].real for k in range(len(mus))] for j in range(n)])
            im = Wm * arb_mat([[cols[k][j].imag for k in range(len(mus))] for j in range(n)])
            out = [[acb(re[r, k], im[r, k]) for k in range(len(mus))] for r in range(len(rows))]
        for r in range(len(rows)):
            if not left[r].is_zero():
                b = left[r].abs_upper()
                out[r] = [z + acb(arb(0, b), arb(0, b)) for z in out[r]]
    return out


def _profile(model):
    """(variance of Q, max |ln P|) of a model's weights in double precision:
    the starting estimate of the cancellation depth."""
    lw = model.log_weights()
    finite = np.isfinite(lw)
    w = np.where(finite, np.exp(lw - np.max(lw[finite])), 0.0)
    q = model.lattice.points()
    mean = float((w * q).sum() / w.sum())
    var = float((w * (q - mean) ** 2).sum() / w.sum())
    return var, float(np.abs(lw[finite]).max())


def _start_bits(mu, var, step, digits, magnitude, n):
    """Starting precision for one theta: the Gaussian depth theta^2 var /
    (2 ln 10) with theta reduced into the period, capped (deeper sums are
    found by raising)."""
    period = 2 * math.pi / float(step)
    t = math.remainder(float(mu), period)
    depth = min(t * t * var / (2 * math.log(10)), START_DEPTH_CAP)
    bits = (depth + digits + GUARD_DIGITS) * LOG2_10 + math.log2(magnitude + 2.0) \
        + math.log2(n + 1.0) + 16
    return _ladder(bits)


def lattice_transform(models, mus, digits=12, check_rows=None, gradient=()):
    """Z(theta)/Z(0) for lattice models sharing one lattice (rows) at every
    theta of ``mus`` (columns), as a :class:`Transform` whose quad_err is the
    rounding error alone (the ball radius). Each theta gets the precision its
    own cancellation needs: raised until the balls of the first
    ``check_rows`` rows carry ``digits`` digits, or marked unresolved at
    MAX_PREC. ``gradient``: Chebyshev coefficient indices k of model 0 whose
    derivatives dZ/dc_k are wanted (the covariance route), returned as in
    the integral engine."""
    mus = as_fractions(mus)
    K = len(mus)
    lattice = models[0].lattice
    if any(m.lattice != lattice for m in models):
        raise ValueError("models in one batch must share their lattice")
    check_rows = len(models) if check_rows is None else check_rows
    var, magnitude = _profile(models[0])
    need = [_start_bits(m, var, lattice.step, digits, magnitude, lattice.count) for m in mus]
    tol = mpmath.mpf(10) ** (-(digits + 1))
    n_rows = len(models) + len(gradient)
    values = [[None] * K for _ in range(n_rows)]
    used = [0] * K
    resolved = [False] * K
    log_z0, grad0 = None, None
    todo = list(range(K))
    cache = {}

    def weights(prec):
        # computed once at the highest precision asked so far, rounded for
        # lower ones (Arb's products are slow on over-long entries)
        top = max(need[k] for k in todo)
        if not cache or cache["prec"] < prec:
            cache.update(zip(("rows", "shifts"), lattice_weights(models, top, gradient)),
                         prec=top)
        if cache["prec"] == prec:
            return cache["rows"], cache["shifts"]
        with ctx.workprec(prec):
            return [[+w for w in r] for r in cache["rows"]], cache["shifts"]

    while todo:
        prec = min(need[k] for k in todo)
        ks = [k for k in todo if need[k] == prec]
        rows, shifts = weights(prec)
        with ctx.workprec(prec):
            z0 = [sum(r, arb(0)) for r in rows[:len(models)]]
        if log_z0 is None:
            log_z0 = [s + float(z.log().mid()) for s, z in zip(shifts, z0)]
        sums = _evaluate(rows, lattice, [mus[k] for k in ks], prec)
        with ctx.workprec(prec):
            if gradient and grad0 is None:
                grad0 = [sum(rows[len(models) + i], arb(0)) / z0[0] for i in range(len(gradient))]
            for i, k in enumerate(ks):
                for r in range(n_rows):
                    # gradient rows are normalised by model 0's Z(0)
                    values[r][k] = sums[r][i] / z0[r if r < len(models) else 0]
                used[k] = prec
        for k in ks:
            todo.remove(k)
            rel = max(relative_radius(values[r][k]) for r in range(check_rows))
            if rel <= tol / 10:
                resolved[k] = True
                continue
            if prec >= MAX_PREC:
                continue
            if rel == mpmath.inf or rel >= 1:
                bits = 2 * prec
            else:
                bits = prec + float(mpmath.log(rel * 10 / tol, 2)) + 32
            need[k] = _ladder(max(bits, prec + 64))
            todo.append(k)
    quad = [[upper(acb(z.real.rad(), z.imag.rad())) for z in values[r]]
            for r in range(check_rows)] + [[None] * K for _ in range(len(models) - check_rows)]
    grad = None
    if gradient:
        grad = (values[len(models):], grad0)
    return Transform(values=values[:len(models)], quad_err=quad, log_z0=log_z0,
                     resolved=resolved, prec=max(used), nodes=lattice.count,
                     method="exact-sum", mus=mus, gradient=grad)
