"""Counting zeros of Z(mu) in a box by the argument principle,
N = (1 / 2 pi i) closed-integral_C Z'/Z dmu = (change of arg Z along C) / 2 pi
(Ahlfors, Complex Analysis, 3rd ed., 5.2), and the power sums of the zeros
inside (Delves & Lyness, Math. Comp. 21, 543 (1967)).

The change of arg along every edge is followed for
Z exp(-i k1 mu + k2 mu^2 / 2), k1 and k2 the mean and variance of the model
density: an entire, zero-free factor changes neither the zeros nor the
count, but it stops the phase of a near-Gaussian Z from turning fast. Steps
are refined until each changes the phase by less than 1 rad, the
log-derivative g = Z'/Z + ... changes by |h| |g(v) - g(u)| <= 0.5 (a zero
within about one step of the path makes this large, so none can slip
between samples) and the phase change agrees with the trapezoid estimate
Im(h (g(u) + g(v)) / 2). If the steps shrink below 1e-9 of the box size, Z
nearly vanishes on the contour (:class:`ContourError`).
"""
import math

import numpy as np
from flint import acb, arb, ctx

from signfree.engine.complex_mu import ContourError, _arb, _point, _to_complex

PHASE_STEP = 1.0           # largest phase change per accepted step (radians)
LOGDERIV_STEP = 0.5        # largest |h| |change of Z'/Z| per accepted step
TRAPEZOID_TOL = 0.05       # agreement of the direct and trapezoid phase steps
EDGE_POINTS = 17           # first sampling of an edge
REFINE_POINTS = 5          # sampling of a refined step
MIN_STEP = 1e-9            # smallest step, relative to the box size
COUNT_TOL = 0.05           # |N - round(N)| allowed


class Counter:
    """The argument principle over boxes. Each edge keeps its samples
    (mu, Z'/Z) at the accepted steps, so that the power sums
    s_k = (1 / 2 pi i) closed-integral mu^k Z'/Z dmu of any box made of
    such edges follow by the trapezoid rule (Delves & Lyness, Math. Comp.
    21, 543 (1967)): s_k = sum of the k-th powers of the zeros inside."""

    def __init__(self, ev, size):
        self.ev = ev
        self.min_step = MIN_STEP * size
        self.edges = {}

    def edge(self, p0, p1):
        """(change of arg Z, samples [(mu, Z'/Z)] in order) along p0 -> p1."""
        if (p0, p1) in self.edges:
            return self.edges[p0, p1]
        if (p1, p0) in self.edges:
            phase, samples = self.edges[p1, p0]
            return -phase, samples[::-1]
        K = EDGE_POINTS
        step = ((p1[0] - p0[0]) / (K - 1), (p1[1] - p0[1]) / (K - 1))
        zs, ds = self.ev.segment(p0, step, K)
        total = 0.0
        samples = [(_cplx(p0), self._deflate(_cplx(p0), _to_complex(ds[0] / zs[0])))]
        for k in range(K - 1):
            total += self._step(_point(p0, step, k), step, zs[k], ds[k], zs[k + 1], ds[k + 1],
                                samples)
        self.edges[p0, p1] = (total, samples)
        return total, samples

    def _deflate(self, mu, g):
        """Z'/Z of Z exp(-i k1 mu + k2 mu^2 / 2) from that of Z."""
        return g - 1j * self.ev.k1 + self.ev.k2 * mu

    def _step(self, u, h, zu, du, zv, dv, samples):
        """Phase change over the step u -> u + h, refined until accepted;
        appends the accepted end points (mu, deflated Z'/Z) to ``samples``.

        The phase followed is that of Z exp(-i k1 mu + k2 mu^2 / 2), which
        has the same zeros and the same change of arg around a closed
        contour (the factor is entire and zero-free) but turns far more
        slowly for a near-Gaussian density. A step is accepted when the
        phase changes by at most PHASE_STEP, the log-derivative g changes by
        |h| |g(v) - g(u)| <= LOGDERIV_STEP (a zero within about one step of
        the segment makes this large) and the phase change agrees with the
        trapezoid estimate Im(h (g(u) + g(v)) / 2) to TRAPEZOID_TOL (so no
        turn by 2 pi can hide)."""
        v = _point(u, h, 1)
        uc, vc = _cplx(u), _cplx(v)
        with ctx.workprec(max(zu.real.rel_accuracy_bits(), 0) + 64):
            U = acb(_arb(u[0]), _arb(u[1]))
            W = acb(_arb(v[0]), _arb(v[1]))
            k1, k2 = arb(self.ev.k1), arb(self.ev.k2)
            dw = acb(0, -1) * k1 * (W - U) + k2 * (W * W - U * U) / 2
            dphi = float(((zv / zu) * dw.exp()).arg().mid())
        hc = vc - uc
        gu = self._deflate(uc, _to_complex(du / zu))
        gv = self._deflate(vc, _to_complex(dv / zv))
        trap = ((gu + gv) / 2 * hc).imag
        if (abs(dphi) <= PHASE_STEP and abs(hc) * abs(gv - gu) <= LOGDERIV_STEP
                and abs(dphi - trap) <= TRAPEZOID_TOL):
            samples.append((vc, gv))
            return dphi
        if abs(hc) < self.min_step:
            raise ContourError((u[0] + h[0] / 2, u[1] + h[1] / 2))
        K = REFINE_POINTS
        sub = (h[0] / (K - 1), h[1] / (K - 1))
        zs, ds = self.ev.segment(u, sub, K)
        return sum(self._step(_point(u, sub, k), sub, zs[k], ds[k], zs[k + 1], ds[k + 1],
                              samples) for k in range(K - 1))

    def count(self, box, moments=0):
        """Zeros in box = (re0, re1, im0, im1) (Fractions), counterclockwise;
        with ``moments`` = K > 0 also the power sums s_1..s_K of the zeros
        about the box centre in units of the half-size (complex floats).
        Raises ContourError with the failing edge (0 bottom, 1 right, 2 top,
        3 left)."""
        re0, re1, im0, im1 = box
        corners = [(re0, im0), (re1, im0), (re1, im1), (re0, im1)]
        total = 0.0
        pieces = []
        for e in range(4):
            try:
                phase, samples = self.edge(corners[e], corners[(e + 1) % 4])
            except ContourError as exc:
                exc.edge = e
                raise
            total += phase
            pieces.append(samples)
        n = total / (2 * math.pi)
        if abs(n - round(n)) > COUNT_TOL:
            raise ContourError(corners[0], edge=0)
        if not moments:
            return int(round(n))
        c = complex(float(re0 + re1) / 2, float(im0 + im1) / 2)
        r = float(max(re1 - re0, im1 - im0)) / 2
        sums = np.zeros(moments + 1, dtype=complex)
        ks = np.arange(moments + 1)
        for samples in pieces:
            mu = np.array([m for m, _ in samples])
            g = np.array([v for _, v in samples])
            w = (mu - c) / r
            f = (w[:, None] ** ks[None, :]) * g[:, None]
            sums += (0.5 * (f[1:] + f[:-1]) * np.diff(mu)[:, None]).sum(axis=0)
        return int(round(n)), sums[1:] / (2j * math.pi)


def _cplx(p):
    return complex(float(p[0]), float(p[1]))


def _roots_from_power_sums(s, n):
    """The n points whose k-th power sums are s_1..s_n (Newton's identities,
    then the roots of the polynomial), as complex floats."""
    e = [1.0 + 0j]
    for k in range(1, n + 1):
        e.append(sum((-1) ** (i - 1) * e[k - i] * s[i - 1] for i in range(1, k + 1)) / k)
    coef = [(-1) ** k * e[k] for k in range(n + 1)]
    return np.roots(coef) if n > 0 else np.array([])

