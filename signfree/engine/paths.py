"""Paths of integration through the saddle: where exp(p(q) + i mu q) does not
cancel.

For a polynomial (Chebyshev) p the integrand is entire, so by Cauchy's
theorem the integral over [a, b] equals the integral along any path from a to
b. The paths used here are rectangles: up (or down) the vertical edge at a,
along the horizontal line Im q = y, and back to the real axis at b. On the
line through the complex saddle q* (p'(q*) = -i mu) the integrand is a
non-oscillating bump of height about |Z(mu)|, so the working precision is set
by the ratio of the path's largest |integrand| to the result instead of by the
cancellation depth 10^D of the real axis. This is the one-dimensional case of
steepest-descent contour deformation (the method of steepest descent, e.g.
Bender & Orszag, Advanced Mathematical Methods, ch. 6; optimised contours for
1D integrals: Pasztor & Pesznyak, arXiv:2509.07881). The vertical edges carry
the endpoint contributions of the model over [a, b].

The plan is made in double precision, from log |integrand| only (no
cancellation happens in a logarithm): on a grid of heights, the largest
log |integrand| of each rectangle; per mu the height that minimises it (the
real axis, height 0, is one of them); consecutive mu sharing one height form
a group. Each group's path is cut into panels where the integrand is above or
below what the wanted digits can see, and each panel gets the Gauss-Legendre
node count of the error bound on the Bernstein ellipse (Trefethen,
Approximation Theory and Approximation Practice, ch. 19), a start that the
engine raises by refinement. Everything here is in window coordinates
x = (q - mid) / half, and p is the model's Chebyshev series in x.
"""
import math
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import chebyshev as C

LEVELS = 96                       # heights per sign on the planning grid
SAMPLES = 1025                    # points along the horizontal line
ALLOWANCE = 16 * math.log(10)     # nats of extra cancellation a group may carry
PANEL_NODES = 96                  # a panel needing more is cut in two
MIN_PANEL_NODES = 8
MAX_SPLITS = 6
_RHOS = np.geomspace(1.02, 40.0, 32)
_THETA = np.linspace(0, 2 * np.pi, 49)[:-1]


@dataclass(frozen=True)
class Panel:
    """A straight piece of the path from ``start`` to ``end`` (window
    coordinates, complex) and its starting Gauss-Legendre node count."""

    start: complex
    end: complex
    nodes: int


@dataclass(frozen=True)
class Path:
    """The rectangle through height ``height`` (window units; 0 is the real
    axis), cut into panels, in order from a to b. ``half``: an even model
    on a symmetric domain, where only Re x >= 0 is walked and the integral
    is twice the real part."""

    height: float
    panels: tuple
    half: bool


@dataclass(frozen=True)
class Group:
    """Consecutive mu (indices lo..hi-1 of the mu list) sharing one path,
    with the planned excess ln(max |integrand| / |Z|) per mu (nats) and
    log2 of the largest sum |c_k T_k(x)| on the path (rounding of p)."""

    lo: int
    hi: int
    path: Path
    log_ratio: tuple
    magnitude_bits: float


def _bump_width(coef):
    """Standard deviation of exp(p) on [-1, 1] in window units (double)."""
    x = np.cos(np.linspace(0, np.pi, 2001))
    p = C.chebval(x, coef)
    w = np.exp(p - p.max()) * np.sqrt(1 - x * x)
    w /= w.sum()
    m = (w * x).sum()
    return math.sqrt(max(float((w * (x - m) ** 2).sum()), 1e-30)), float(p.max())


def _levels(vmax):
    return np.concatenate([-vmax * np.linspace(1, 0, LEVELS + 1)[:-1], [0.0],
                           vmax * np.linspace(0, 1, LEVELS + 1)[1:]])


def _largest(coef, mus, half, even, vmax, real_only=False):
    """R[k, i]: the largest ln |integrand| (dq included) on the rectangle of
    height v_i for mu_k, with the profile re p(u + i v_i) kept for the
    panels."""
    v = _levels(vmax)
    u = np.linspace(0.0 if even else -1.0, 1.0, SAMPLES)
    mr, mi = mus.real, mus.imag
    # only the heights on the side(s) the mus can use: Im q* has the sign of Re mu
    lo = LEVELS if (real_only or mr.min(initial=0.0) >= 0) else 0
    hi = LEVELS + 1 if (real_only or mr.max(initial=0.0) <= 0) else 2 * LEVELS + 1
    P = np.full((len(v), len(u)), np.inf)
    P[lo:hi] = C.chebval(u[None, :] + 1j * v[lo:hi, None], coef).real
    mu_y = np.outer(mr, half * v)                         # Re mu Im q
    if not mi.any():
        R = P.max(axis=1)[None, :] - mu_y
    else:   # |exp(i mu q)| = exp(-Re mu Im q - Im mu Re q)
        R = (P[None, :, :] - np.multiply.outer(mi, half * u)[:, None, :]).max(axis=2) - mu_y
    zero = LEVELS
    for col in ([-1] if even else [0, -1]):
        edge = P[:, col][None, :] - mu_y - (mi * half * u[col])[:, None]
        # the vertical edge from 0 to v_i: running maximum outward from v = 0
        up = np.maximum.accumulate(edge[:, zero:], axis=1)
        down = np.maximum.accumulate(edge[:, zero::-1], axis=1)[:, ::-1]
        R = np.maximum(R, np.concatenate([down[:, :-1], up], axis=1))
    return v, u, P, R + math.log(half)


def _nodes_for(coef, x0, x1, mus, half, log_tol):
    """Gauss-Legendre nodes on the panel x0..x1 from the error bound
    (64/15) M rho^(-2n) / (rho^2 - 1) on the Bernstein ellipse E_rho
    (Trefethen, ATAP ch. 19, Theorem 19.3), M = max |integrand| on E_rho,
    minimised over rho; ``mus`` representative mu of the group and
    ``log_tol`` their absolute tolerances (ln)."""
    c, h = 0.5 * (x0 + x1), 0.5 * (x1 - x0)
    if abs(h) == 0:
        return MIN_PANEL_NODES
    z = np.exp(1j * _THETA)
    u = 0.5 * (_RHOS[:, None] * z[None, :] + 1.0 / (_RHOS[:, None] * z[None, :]))
    x = c + h * u
    with np.errstate(all="ignore"):
        re = C.chebval(x, coef).real
        lm = np.max([(re - _tilt(mu, x, half)).max(axis=1) - t for mu, t in zip(mus, log_tol)],
                    axis=0) + math.log(half)
        n = (lm + math.log(abs(h)) + math.log(64 / 15) - np.log(_RHOS ** 2 - 1)) \
            / (2 * np.log(_RHOS))
    n = n[np.isfinite(n)]
    if not len(n):
        return 4 * PANEL_NODES
    return int(max(MIN_PANEL_NODES, math.ceil(1.1 * n.min())))


_BOUND_THETA = np.linspace(0, 2 * np.pi, 257)[:-1]


def quadrature_bound(coef, path, half, mus, counts):
    """ln of an upper bound of the Gauss-Legendre error along ``path`` for
    every mu (floats), with ``counts`` nodes on the panels: the sum over
    panels of min over rho of |h| (64/15) M_rho rho^(-2n) / (rho^2 - 1)
    (Trefethen, ATAP ch. 19, Theorem 19.3), M_rho the largest
    |exp(p(x) + i mu q)| dq/dx on the Bernstein ellipse E_rho of the panel,
    taken from 256 points of its boundary (where the maximum lies, by the
    maximum modulus principle), in double precision. The integrand is the
    unshifted exp(p); for a half path the bound is for that half (mu real)."""
    mus = np.asarray(mus, dtype=float)
    # ln M_rho(mu) is a maximum of functions affine in mu, hence convex: between
    # two points of a grid of mu it lies below the chord, so the linear
    # interpolation of its grid values bounds it at every mu
    grid = np.unique(mus) if len(np.unique(mus)) <= 33 else \
        np.linspace(mus.min(), mus.max(), 33)
    if len(grid) > 1:
        idx = np.clip(np.searchsorted(grid, mus, side="right") - 1, 0, len(grid) - 2)
        t = (mus - grid[idx]) / (grid[idx + 1] - grid[idx])
    z = np.exp(1j * _BOUND_THETA)
    u = 0.5 * (_RHOS[:, None] * z[None, :] + 1.0 / (_RHOS[:, None] * z[None, :]))
    total = np.full(len(mus), -np.inf)
    for pnl, n in zip(path.panels, counts):
        c, h = 0.5 * (pnl.start + pnl.end), 0.5 * (pnl.end - pnl.start)
        if abs(h) == 0:
            continue
        x = c + h * u
        with np.errstate(all="ignore"):
            re = C.chebval(x, coef).real                       # rho x theta
            lm = np.max(re[:, :, None] - np.multiply.outer(half * x.imag, grid), axis=1)
            b = lm + math.log(half) + math.log(abs(h)) + math.log(64 / 15) \
                - np.log(_RHOS ** 2 - 1)[:, None] - 2 * n * np.log(_RHOS)[:, None]
        b = np.where(np.isfinite(b), b, np.inf)                # rho x grid
        if len(grid) > 1:
            with np.errstate(invalid="ignore"):
                b = (1 - t) * b[:, idx] + t * b[:, idx + 1]    # rho x K
            b = np.where(np.isnan(b), np.inf, b)
        else:
            b = np.repeat(b, len(mus), axis=1)
        total = np.logaddexp(total, b.min(axis=0))
    return total


def _tilt(mu, x, half):
    """-ln |exp(i mu q)| up to a constant: Re mu Im q + Im mu Re q, q = half x."""
    mu = complex(mu)
    return half * (mu.real * np.imag(x) + mu.imag * np.real(x))


def _runs(active):
    """Boundaries (indices) between runs of equal values of a boolean array."""
    return [i for i in range(1, len(active)) if active[i] != active[i - 1]]


def _panels_on(coef, x0, x1, cuts, mus, half, log_tol):
    """Panels on the straight piece x0..x1 cut at the fractions ``cuts``;
    a panel needing more than PANEL_NODES nodes is cut in two when the two
    halves together need fewer nodes (at most MAX_SPLITS times)."""
    fr = sorted({0.0, 1.0, *[float(t) for t in cuts if 0.0 < t < 1.0]})
    todo = [(x0 + (x1 - x0) * s, x0 + (x1 - x0) * t, 0) for s, t in zip(fr[:-1], fr[1:])]
    todo = [(a, b, d, _nodes_for(coef, a, b, mus, half, log_tol)) for a, b, d in todo]
    out = []
    while todo:
        a, b, depth, n = todo.pop(0)
        if n > PANEL_NODES and depth < MAX_SPLITS:
            m = 0.5 * (a + b)
            left = _nodes_for(coef, a, m, mus, half, log_tol)
            right = _nodes_for(coef, m, b, mus, half, log_tol)
            if left + right < n:
                todo[:0] = [(a, m, depth + 1, left), (m, b, depth + 1, right)]
                continue
        out.append(Panel(complex(a), complex(b), n))
    return out


def _path(coef, level, v, u, P, mus, half, even, log_floor, log_tol):
    """The panels of the rectangle at grid level ``level`` for the mus of a
    group (``mus`` representative values, ``log_floor`` per mu the ln of an
    |integrand| too small to matter, ``log_tol`` the ln of the absolute
    quadrature tolerance)."""
    y = float(v[level])
    active = np.max([P[level] - _tilt(mu, u + 1j * y, half) - f for mu, f in zip(mus, log_floor)],
                    axis=0) + math.log(half) > 0
    cuts = [(u[i] - u[0]) / (u[-1] - u[0]) for i in _runs(active)]
    # widen each cut by a grid step towards the inactive side (the crossing lies between samples)
    step = (u[1] - u[0]) / (u[-1] - u[0])
    cuts = [t - step if active[int(round(t / step))] else t + step for t in cuts]
    x0 = 0.0 if even else -1.0
    horizontal = _panels_on(coef, complex(x0, y), complex(1.0, y), cuts, mus, half, log_tol)
    if y == 0.0:
        return Path(height=0.0, panels=tuple(horizontal), half=even)
    zero = LEVELS
    idx = range(zero, level + 1) if level > zero else range(zero, level - 1, -1)
    ts = np.array([v[i] for i in idx])

    def vertical(col, start, end):
        prof = np.array([P[i, col] for i in idx]) + math.log(half) + \
            np.max([-_tilt(mu, u[col] + 1j * ts, half) - f for mu, f in zip(mus, log_floor)],
                   axis=0)
        act = prof > 0
        cuts = [abs(ts[i]) / abs(y) for i in _runs(act)]
        if start.imag != 0:      # walked from the top down
            cuts = [1.0 - t for t in cuts]
        return _panels_on(coef, start, end, cuts, mus, half, log_tol)

    right = vertical(-1, complex(1.0, y), complex(1.0, 0.0))
    left = [] if even else vertical(0, complex(-1.0, 0.0), complex(-1.0, y))
    return Path(height=y, panels=tuple(left + horizontal + right), half=even)


def magnitude_bits(coef, path):
    """log2 of an upper bound of sum_k |c_k T_k(x)| on the path
    (|T_k(x)| <= |w|^k, w = x + sqrt(x^2 - 1), |w| >= 1, largest at the
    corners)."""
    top = 1.0
    for pnl in path.panels:
        for x in (pnl.start, pnl.end):
            s = np.sqrt(complex(x) - 1) * np.sqrt(complex(x) + 1)
            top = max(top, abs(x + s), abs(x - s))
    tot = sum(abs(float(c)) * top ** k for k, c in enumerate(coef))
    return math.log2(tot + 2.0)


def plan(coef, domain, mus, digits, even=False, force_real=False, common=False):
    """Groups of consecutive mu of the list ``mus`` (floats, or complex
    numbers) with their paths, planned for the model ``coef`` on ``domain``;
    ``common``: one group for all of them, on the height that keeps the
    largest excess smallest (the real axis when it is within the
    allowance); ``force_real``: the real axis only (with ``common``, its
    cancellation is still estimated from the best heights)."""
    coef = np.asarray(coef, dtype=float)
    a, b = float(domain[0]), float(domain[1])
    half = 0.5 * (b - a)
    mus = np.asarray(mus)
    mus = mus.astype(complex if np.iscomplexobj(mus) else float)
    sd, _ = _bump_width(coef)
    # log |Z| of the Gaussian saddle estimate: the path's peak times the bump width
    width = math.log(math.sqrt(2 * math.pi) * sd)
    vmax = max(1.5 * float(np.abs(mus.real).max(initial=0.0)) * half * sd * sd, 1e-3)
    # the grid of heights: from the Gaussian estimate, widened while the best
    # height sits at its top and narrowed while every best height lies in its
    # lowest quarter (saddles of non-Gaussian densities move slower than mu var)
    for _ in range(6):
        # force_real with common: the real axis, with |Z| still estimated from every height
        v, u, P, R = _largest(coef, mus, half, even, vmax, force_real and not common)
        if force_real and not common:
            break
        top = float(np.abs(v[R.argmin(axis=1)]).max(initial=0.0))
        if top >= vmax * (1 - 1.0 / LEVELS) and vmax < 8:
            vmax *= 2
        elif 0 < top < vmax / 4:
            vmax = 1.5 * top
        else:
            break
    zero = LEVELS
    low = R.min(axis=1)
    log_z = low + width
    excess = R - low[:, None]
    K = len(mus)
    groups, k = [], 0
    while k < K:
        if common and not force_real:
            j = K
            worst = excess.max(axis=0)
            level = zero if worst[zero] <= ALLOWANCE else int(worst.argmin())
        elif force_real or excess[k, zero] <= ALLOWANCE:
            j = k + 1
            while j < K and (force_real or excess[j, zero] <= ALLOWANCE):
                j += 1
            level = zero
        else:
            ok = excess[k] <= ALLOWANCE
            j = k + 1
            while j < K and (ok & (excess[j] <= ALLOWANCE)).any() \
                    and excess[j, zero] > ALLOWANCE:
                ok = ok & (excess[j] <= ALLOWANCE)
                j += 1
            cand = np.flatnonzero(ok)
            level = int(cand[excess[k:j][:, cand].max(axis=0).argmin()])
        pick = np.unique(np.linspace(k, j - 1, min(j - k, 7)).round().astype(int))
        lz = log_z[pick]
        floor = lz - (digits + 8) * math.log(10) - math.log(2 * half)
        tol = lz - (digits + 3) * math.log(10) - math.log(32)
        path = _path(coef, level, v, u, P, mus[pick], half, even and a == -b, floor, tol)
        ratio = tuple(float(R[i, level] - log_z[i]) for i in range(k, j))
        groups.append(Group(k, j, path, ratio, magnitude_bits(coef, path)))
        k = j
    return groups
