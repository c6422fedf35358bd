"""Zeros of Z(mu) = Int exp(p(q) + i mu q) dq in a box of the complex mu plane,
for a Chebyshev model p of ln rho on its data domain.

Z is entire in mu (the range of q is finite), so the number of zeros inside
a closed contour C on which Z does not vanish is given by the argument
principle, N = (1 / 2 pi i) closed-integral_C Z'/Z dmu = (change of arg Z
along C) / 2 pi (Ahlfors, Complex Analysis, 3rd ed., 5.2), with
Z'(mu) = i Int q exp(p(q) + i mu q) dq from the same quadrature. The zeros
nearest to mu = 0 set the convergence radius of the cumulant expansion of
ln Z (Lee & Yang 1952: the zeros of the partition function in the complex
plane of the field), and real zeros are sign changes of the phase factor.

Method
------
* Z and Z' at complex mu: Gauss-Legendre nodes on the domain and ln rho
  at the nodes (:mod:`signfree.quadrature`), sums in Arb ball arithmetic
  (Johansson, IEEE Trans. Computers 2017). Along a straight
  segment mu_k = a + k h the exponentials factorise,
  exp(i mu_{aB+b} q) = exp(i (a + aBh) q) exp(i b h q), and the sums are one
  ball matrix product. The precision is raised until the balls carry the
  accuracy needed (the cancellation depth at each mu is read off the
  radii); the node count until an n- and a 1.5 n-point rule agree at probe
  points (the corners and edge midpoints of the box, and any point where
  the estimate was not good enough), relative to Int |integrand|
  (Trefethen, Approximation Theory and Approximation Practice, ch. 19).
* Counting: the change of arg along every edge is followed for
  Z exp(-i k1 mu + k2 mu^2 / 2), k1 and k2 the mean and variance of the
  model density: an entire, zero-free factor changes neither the zeros nor
  the count, but it stops the phase of a near-Gaussian Z from turning fast.
  Steps are refined until each changes the phase by less than 1 rad, the
  log-derivative g = Z'/Z + ... changes by |h| |g(v) - g(u)| <= 0.5 (a zero
  within about one step of the path makes this large, so none can slip
  between samples) and the phase change agrees with the trapezoid
  estimate Im(h (g(u) + g(v)) / 2). If the steps shrink below 1e-9 of the
  box size, Z nearly vanishes on the contour: the edge is moved slightly
  and the count repeated.
* Isolation: in a box holding N <= POWER_SUM_MAX zeros, the power sums
  s_k = (1 / 2 pi i) closed-integral mu^k Z'/Z dmu = sum of the k-th powers
  of the zeros (trapezoid rule on the contour samples) give, by Newton's
  identities, a polynomial whose roots are starting points (Delves & Lyness,
  Math. Comp. 21, 543 (1967)); Newton's iteration refines each, and if N
  distinct zeros converge inside the box they are all of them. Otherwise
  the box is quartered (split lines nudged off centre, and moved if they
  pass through a zero) and each quarter treated alike. A small box still
  holding N > 1 zeros, where Newton's iteration for an N-fold zero,
  z <- z - N Z/Z' (Schroeder, Math. Ann. 2, 317 (1870)), converges from the
  centroid s_1 / N and a tiny box around the limit counts N again, is
  reported as a cluster of multiplicity N.
  The error estimate of a zero is the last Newton step, taken after the
  step fell below the tolerance (plus the effect of the quadrature and
  rounding error of Z, |dZ| / |Z'|).
* The data range: outside [q_min, q_max] the model density is zero. The
  leading endpoint terms of the integral (integration by parts),
  exp(p(b) + i mu b) / (p'(b) + i mu) at both ends, bound what the unknown
  density beyond the range can change in Z at the level of the first term;
  a zero moves by that over |Z'| (``edge_shift``), and a zero whose
  edge_shift exceeds 10% of its distance to the nearest other zero is
  flagged as a possible artefact of the finite range (the cut-off itself
  makes zeros where the endpoint terms rival Z).
"""
import math
import sys
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from fractions import Fraction
from pathlib import Path

import mpmath
import numpy as np
from flint import acb, acb_mat, arb, ctx, fmpq

from signfree import engine
from signfree.quadrature import chebyshev_at_nodes, gauss_legendre_rule

PHASE_BITS = 30            # relative accuracy of Z wanted while counting
PHASE_STEP = 1.0           # largest phase change per accepted step (radians)
LOGDERIV_STEP = 0.5        # largest |h| |change of Z'/Z| per accepted step
TRAPEZOID_TOL = 0.05       # agreement of the direct and trapezoid phase steps
EDGE_POINTS = 17           # first sampling of an edge
REFINE_POINTS = 5          # sampling of a refined step
MIN_STEP = 1e-9            # smallest step, relative to the box size
COUNT_TOL = 0.05           # |N - round(N)| allowed
MAX_DEPTH = 40             # quartering levels
SPLIT_OFFSETS = (Fraction(17, 1000), Fraction(-29, 1000), Fraction(43, 1000),
                 Fraction(-61, 1000), Fraction(83, 1000))
EDGE_SHIFTS = 6
POWER_SUM_MAX = 6          # boxes with at most this many zeros: power sums
CLUSTER_BOX = Fraction(1, 256)   # boxes this small (of the first) may hold a cluster
EDGE_FRACTION = mpmath.mpf("0.1")  # edge shift, relative to the zero spacing, that flags


class ContourError(ArithmeticError):
    """Z (nearly) vanishes on a contour, at ``mu`` on edge ``edge``."""

    def __init__(self, mu, edge=None):
        self.mu = mu
        self.edge = edge
        super().__init__(f"Z(mu) nearly vanishes on the contour near mu = "
                         f"{_fmt_complex(mu)}")


def _fmt_complex(mu):
    re, im = (float(x) for x in mu)
    return f"{re:.6g}{'+' if im >= 0 else '-'}{abs(im):.6g}i"


def _frac(x):
    """An exact Fraction of a Fraction, int, float, decimal string or mpf."""
    if isinstance(x, Fraction):
        return x
    if isinstance(x, mpmath.mpf):
        if not mpmath.isfinite(x):
            raise ValueError(f"non-finite value {x}")
        sign, man, exp, _ = x._mpf_
        return Fraction(-int(man) if sign else int(man)) * (Fraction(2) ** int(exp))
    if isinstance(x, str):
        return Fraction(x.strip())
    return Fraction(x)


def _arb(x):
    return arb(fmpq(x.numerator, x.denominator))


def _to_complex(z):
    """An acb midpoint as a Python complex (moderate magnitudes only)."""
    return complex(float(z.real.mid()), float(z.imag.mid()))


def _log_abs(z):
    """ln |mid z| of an acb ball, as a float (any exponent)."""
    m = engine.abs_mid(z)
    return -math.inf if m == 0 else float(mpmath.log(m))


# ------------------------------------------------------------ evaluation

class _Evaluator:
    """Z(mu) and Z'(mu) of one Chebyshev model at complex mu (pairs of
    Fractions), with the precision and node count kept adequate."""

    def __init__(self, model, box, digits):
        from signfree.chebyshev import ChebyshevModel
        if not isinstance(model, ChebyshevModel):
            raise TypeError("zeros are found for Chebyshev models of ln rho")
        self.model = model
        self.coef = [float(c) for c in model.coef]
        self.degree = max(len(self.coef) - 1, 1)
        a, b = model.domain
        self.domain = (float(a), float(b))
        self.half = 0.5 * (b - a)
        x = np.cos(np.linspace(0, np.pi, 2001))
        p = model.log_density(0.5 * (a + b) + self.half * x)
        # one normalisation for every node set, so that rules can be compared
        self.shift = float(np.max(p))
        wgt = np.exp(p - p.max()) * np.sqrt(1 - x * x)
        wgt /= wgt.sum()
        qg = 0.5 * (a + b) + self.half * x
        mean = float((wgt * qg).sum())
        var = max(float((wgt * (qg - mean) ** 2).sum()), 1e-300)
        # the Gaussian factor exp(i k1 mu - k2 mu^2 / 2) that the counting
        # divides out (any values are correct; close ones save steps)
        self.k1, self.k2 = mean, var
        re0, re1, im0, im1 = (float(v) for v in box)
        mu_max = max(abs(re0), abs(re1)) + max(abs(im0), abs(im1))
        depth = max(re0 ** 2, re1 ** 2) * var / (2 * math.log(10))
        # a modest start (oscillation and width of the peak in window
        # units); the probes raise it where needed
        self.n = _ladder(int(16 + 0.35 * mu_max * self.half
                             + 0.3 * math.sqrt(2.3 * (depth + digits + 5) / var) * self.half))
        self.prec = engine.precision_bits(depth, 10, float(np.abs(p).max()), self.n)
        self.cache = {}
        self.eps = {}
        self.probes = [(_frac(r), _frac(i)) for r in (re0, 0.5 * (re0 + re1), re1)
                       for i in (im0, 0.5 * (im0 + im1), im1)]
        self.evaluations = 0

    @property
    def n_used(self):
        return self._next(self.n)

    @staticmethod
    def _next(n):
        return _ladder((3 * n + 1) // 2)

    def nodes(self, n, prec):
        key = (n, prec)
        if key not in self.cache:
            xs, ws = gauss_legendre_rule(n, prec)
            vals = chebyshev_at_nodes(self.coef, n, prec)
            with ctx.workprec(prec):
                shift = arb(self.shift)
                a, b = arb(self.domain[0]), arb(self.domain[1])
                half, mid = (b - a) / 2, (a + b) / 2
                qs = [mid + half * x for x in xs]
                W = [w * half * (v - shift).exp() for w, v in zip(ws, vals)]
                Wq = [wj * qj for wj, qj in zip(W, qs)]
                logw = np.array([math.log(float(w.mid())) + float((v - shift).mid())
                                 + math.log(float(half.mid())) for w, v in zip(ws, vals)])
                qf = np.array([float(q.mid()) for q in qs])
            if len(self.cache) > 12:
                self.cache.pop(next(iter(self.cache)))
            self.cache[key] = (qs, W, Wq, logw, qf)
        return self.cache[key]

    def log_scale(self, mu_im, n):
        """ln Int |exp(p + i mu q)| dq (over the nodes), up to the common shift."""
        _, _, _, logw, qf = self.nodes(n, self.prec)
        t = logw - float(mu_im) * qf
        top = t.max()
        return float(top + math.log(np.exp(t - top).sum()))

    def _sums(self, start, step, count, n, prec):
        """(Z_k, Z'_k) at mu_k = start + k step, k < count (complex Fraction
        pairs), by the factorised exponentials and one ball matrix product."""
        qs, W, Wq, _, _ = self.nodes(n, prec)
        with ctx.workprec(prec):
            a = acb(_arb(start[0]), _arb(start[1]))
            h = acb(_arb(step[0]), _arb(step[1]))
            if count == 1:
                z = zp = acb(0)
                for q, w, wq in zip(qs, W, Wq):
                    e = (acb(0, 1) * a * q).exp()
                    z += w * e
                    zp += wq * e
                return [z], [acb(0, 1) * zp]
            B = math.isqrt(count - 1) + 1
            A = -(-count // B)
            ih = acb(0, 1) * h
            rows_z, rows_d, F = [], [], []
            for q, w, wq in zip(qs, W, Wq):
                f = (ih * q).exp()
                g = (acb(0, 1) * a * q).exp()
                gB = f ** B
                col = []
                for _ in range(A):
                    col.append(g)
                    g = g * gB
                rows_z.append([w * c for c in col])
                rows_d.append([wq * c for c in col])
                row, t = [], acb(1)
                for _ in range(B):
                    row.append(t)
                    t = t * f
                F.append(row)
            n_nodes = len(qs)
            M = acb_mat([[rows_z[j][i] for j in range(n_nodes)] for i in range(A)]
                        + [[rows_d[j][i] for j in range(n_nodes)] for i in range(A)])
            prod = M * acb_mat(F)
            zs = [prod[k // B, k % B] for k in range(count)]
            ds = [acb(0, 1) * prod[A + k // B, k % B] for k in range(count)]
        self.evaluations += count
        return zs, ds

    def _quad_eps(self, n):
        """max over the probes of |Z_n - Z_{1.5n}| / Int |integrand|."""
        if n not in self.eps:
            worst = 0.0
            n1 = self._next(n)
            for p in self.probes:
                z0, _ = self._sums(p, (Fraction(0), Fraction(0)), 1, n, self.prec)
                z1, _ = self._sums(p, (Fraction(0), Fraction(0)), 1, n1, self.prec)
                diff = engine.upper(z0[0] - z1[0])
                ls = self.log_scale(p[1], n1)
                rel = -math.inf if diff == 0 else float(mpmath.log(diff)) - ls
                worst = max(worst, math.exp(min(max(rel, -700.0), 700.0)))
            self.eps[n] = worst
        return self.eps[n]

    def segment(self, start, step, count, want_bits=PHASE_BITS):
        """(Z_k, Z'_k) on a segment with relative accuracy 2^-want_bits of
        each Z_k (rounding and quadrature); raises ContourError where that
        cannot be reached because Z_k is (nearly) zero."""
        tries = 0
        while True:
            tries += 1
            N = self.n_used
            zs, ds = self._sums(start, step, count, N, self.prec)
            worst = min(z.rel_accuracy_bits() for z in zs)
            if worst < want_bits:
                k = min(range(count), key=lambda i: zs[i].rel_accuracy_bits())
                if self.prec >= engine.MAX_PREC or tries > 8:
                    raise ContourError(_point(start, step, k))
                self.prec = min(engine.MAX_PREC,
                                int(self.prec + want_bits - max(worst, -self.prec) + 64)
                                // 64 * 64)
                continue
            eps = self._quad_eps(self.n)
            bad = None
            for k, z in enumerate(zs):
                mu = _point(start, step, k)
                if math.log(max(eps, 1e-300)) + self.log_scale(mu[1], N) - _log_abs(z) \
                        > -want_bits * math.log(2):
                    bad = mu
                    break
            if bad is None:
                return zs, ds
            if self.n_used > engine.MAX_NODES or tries > 12:
                raise ContourError(bad)
            self.probes.append(bad)
            self.eps.pop(self.n, None)
            if self._quad_eps(self.n) == eps:
                self.n = self.n_used

    def point_for_newton(self, mu, digits, scale):
        """(Z, Z', error bound of Z) at mu with the absolute error of Z below
        10^-(digits+2) * scale * |Z'|, so that the Newton step is good to
        ``digits`` digits of ``scale``."""
        zero = (Fraction(0), Fraction(0))
        for _ in range(16):
            N = self.n_used
            zs, ds = self._sums(mu, zero, 1, N, self.prec)
            z, d = zs[0], ds[0]
            if d.rel_accuracy_bits() < 20:
                self.prec = min(engine.MAX_PREC, self.prec * 2 // 64 * 64)
                continue
            target = mpmath.mpf(10) ** (-(digits + 2)) * scale * engine.abs_mid(d)
            rad = engine.upper(acb(z.real.rad(), z.imag.rad()))
            if rad > target and self.prec < engine.MAX_PREC:
                extra = float(mpmath.log(rad / target, 2)) + 32
                self.prec = min(engine.MAX_PREC, int(self.prec + extra + 63) // 64 * 64)
                continue
            quad = mpmath.mpf(self._quad_eps(self.n)) * mpmath.exp(self.log_scale(mu[1], N))
            if quad > target and self.n_used <= engine.MAX_NODES:
                self.probes.append(mu)
                self.eps.pop(self.n, None)
                if mpmath.mpf(self._quad_eps(self.n)) * mpmath.exp(self.log_scale(mu[1], N)) \
                        > target:
                    self.n = self.n_used
                continue
            return z, d, rad + quad
        return z, d, rad + quad


def _ladder(n):
    """The smallest node count >= n on the ladder 32 * 1.5^k, so that node
    sets are shared between evaluations."""
    m = 32
    while m < n:
        m = (3 * m + 1) // 2
    return m


def _point(start, step, k):
    return (start[0] + k * step[0], start[1] + k * step[1])


# ------------------------------------------------------------- counting

class _Counter:
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


# ------------------------------------------------------------- results

@dataclass(frozen=True)
class Zero:
    """One zero (or cluster) of Z(mu): re + i im, error estimate, multiplicity."""

    re: mpmath.mpf
    im: mpmath.mpf
    err: mpmath.mpf
    multiplicity: int = 1
    converged: bool = True
    edge_shift: mpmath.mpf = None

    @property
    def edge_limited(self):
        """The ends of the data range could move this zero by more than
        EDGE_FRACTION of its distance to the nearest other zero (or of |mu|)."""
        return self.edge_shift is not None and self.edge_shift >= self._spacing * EDGE_FRACTION

    _spacing = mpmath.inf

    @property
    def value(self):
        return mpmath.mpc(self.re, self.im)

    def __abs__(self):
        return abs(self.value)


@dataclass
class ZeroResult:
    """Zeros of Z(mu) found in a box, the argument-principle count, the
    convergence radius of the cumulant series and what it rests on.

    box         (re0, re1, im0, im1) as used (edges moved slightly where Z
                nearly vanished on them)
    count       zeros in the box by the argument principle
    radius      distance from 0 to the nearest zero found (None if none)
    radius_lower_bound  the series converges at least out to this |mu|: the
                radius if the disc lies in the box, else the distance from 0
                to the box boundary when 0 is inside (None otherwise)
    note        set when the box does not contain the disc |mu| < radius
    """

    zeros: list
    count: int
    box: tuple
    radius: mpmath.mpf = None
    radius_lower_bound: mpmath.mpf = None
    note: str = None
    notes: list = field(default_factory=list)
    model: str = ""
    digits: int = 12
    evaluations: int = 0
    seconds: float = 0.0

    COLUMNS = ("re", "im", "err", "multiplicity", "edge_shift")

    def records(self):
        return [{"re": _with_err(z.re, z.err, self.digits),
                 "im": _with_err(z.im, z.err, self.digits),
                 "err": _sci(z.err, 2), "multiplicity": str(z.multiplicity),
                 "edge_shift": "" if z.edge_shift is None else _sci(z.edge_shift, 2)}
                for z in self.zeros]

    def summary(self):
        return {"count": self.count, "found": sum(z.multiplicity for z in self.zeros),
                "radius": None if self.radius is None else _sci(self.radius, self.digits),
                "radius_lower_bound": None if self.radius_lower_bound is None
                else _sci(self.radius_lower_bound, 6),
                "note": self.note, "notes": list(self.notes), "model": self.model,
                "box": [str(float(v)) for v in self.box], "digits": self.digits}

    def text(self):
        head = ["re", "im", "err", "mult", "edge shift"]
        rows = [[r["re"], r["im"], r["err"], r["multiplicity"], r["edge_shift"]]
                for r in self.records()]
        lines = []
        if rows:
            widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
            fmt = "  ".join("{:>%d}" % w for w in widths)
            lines += [fmt.format(*head)] + [fmt.format(*r) for r in rows]
        else:
            lines.append("no zeros in the box")
        b = self.box
        lines.append(f"box re [{float(b[0]):g}, {float(b[1]):g}], im [{float(b[2]):g}, "
                     f"{float(b[3]):g}]: {self.count} zero(s) by the argument principle")
        if self.radius is not None:
            lines.append(f"convergence radius of the cumulant series: {_sci(self.radius, 8)}")
        elif self.radius_lower_bound is not None:
            lines.append("convergence radius of the cumulant series: at least "
                         f"{_sci(self.radius_lower_bound, 6)}")
        for note in ([self.note] if self.note else []) + list(self.notes):
            lines.append(f"note: {note}")
        return "\n".join(lines)


def _sci(x, nsig):
    with mpmath.workdps(max(15, nsig + 5)):
        s = mpmath.nstr(mpmath.mpf(x), max(1, nsig), min_fixed=-4, max_fixed=6)
    return s


def _with_err(x, err, digits):
    """x with the digits that err supports (at most ``digits``); '0' when
    |x| lies below the error."""
    if abs(x) <= err:
        return "0"
    top = int(mpmath.floor(mpmath.log10(abs(x))))
    last = top - digits + 1
    if err > 0:
        last = max(last, int(mpmath.floor(mpmath.log10(err))))
    return _sci(x, max(1, top - last + 1))


# ------------------------------------------------------------- the search

def parse_box(spec):
    """'re0:re1,im0:im1' (or a 4-sequence, or ((re0, re1), (im0, im1))) as
    four Fractions; raises ValueError."""
    try:
        if isinstance(spec, str):
            parts = [p.split(":") for p in spec.split(",")]
            if len(parts) != 2 or any(len(p) != 2 for p in parts):
                raise ValueError
            vals = [Fraction(v.strip()) for p in parts for v in p]
        else:
            flat = list(spec)
            if len(flat) == 2:
                flat = list(flat[0]) + list(flat[1])
            if len(flat) != 4:
                raise ValueError
            vals = [_frac(v) for v in flat]
    except (ValueError, TypeError, ZeroDivisionError):
        raise ValueError(f"--box {spec!r}: expected re0:re1,im0:im1 such as "
                         "-3:3,-1:1") from None
    re0, re1, im0, im1 = vals
    if not (re0 < re1 and im0 < im1):
        raise ValueError(f"--box {spec!r}: expected re0 < re1 and im0 < im1")
    return (re0, re1, im0, im1)


def _newton(ev, z0, m, digits, limit_box, max_iter=40):
    """Newton's iteration z <- z - m Z/Z' from z0 (Schroeder's form for an
    m-fold zero), until a step is below 10^-digits of the box scale; then one
    more step, whose size is the error estimate. Returns (z as a Fraction
    pair, error estimate, converged)."""
    re0, re1, im0, im1 = limit_box
    scale = max(mpmath.mpf(1), mpmath.mpf(float(max(abs(re0), abs(re1), abs(im0), abs(im1)))))
    tol = mpmath.mpf(10) ** (-digits) * scale
    z = z0
    prev = mpmath.inf
    growing = 0
    done = False
    for _ in range(max_iter):
        Z, D, dz = ev.point_for_newton(z, digits, scale)
        if D.is_zero():
            return z, mpmath.inf, False
        s = m * Z / D
        step = mpmath.mpc(engine.to_mpf(s.real), engine.to_mpf(s.imag))
        size = abs(step)
        z = (_round_frac(z[0] - _frac(step.real), digits),
             _round_frac(z[1] - _frac(step.imag), digits))
        if not (re0 <= z[0] <= re1 and im0 <= z[1] <= im1):
            return z, mpmath.inf, False
        if done:
            return z, max(size, m * dz / engine.abs_mid(D)), True
        if size <= tol:
            done = True
            continue
        growing = growing + 1 if size >= prev else 0
        if growing >= 4:
            return z, mpmath.inf, False
        prev = size
    return z, prev, False


def _round_frac(x, digits):
    """x rounded to a binary fraction of about digits + 20 significant
    digits, to keep the exact arithmetic small."""
    if x == 0:
        return x
    bits = int((digits + 20) * engine.LOG2_10)
    e = math.frexp(float(x))[1]
    denom = 2 ** max(0, bits - e)
    return Fraction(round(x * denom), denom)


class _Search:
    def __init__(self, model, box, digits):
        self.ev = _Evaluator(model, box, digits)
        self.size = max(box[1] - box[0], box[3] - box[2])
        self.counter = _Counter(self.ev, float(self.size))
        self.digits = digits
        self.notes = []
        # the outer box with some slack: Newton iterates may leave a box
        # but not this one
        pad = self.size / 2
        self.limit = (box[0] - pad, box[1] + pad, box[2] - pad, box[3] + pad)

    def count_top(self, box):
        """Count in the user's box, moving an edge outwards slightly where Z
        nearly vanishes on it."""
        box = list(box)
        last = None
        for attempt in range(EDGE_SHIFTS):
            try:
                return tuple(box), self.counter.count(tuple(box))
            except ContourError as exc:
                last = exc
                e = exc.edge if exc.edge is not None else 0
                shift = self.size * Fraction(13 * (attempt + 1), 10000)
                i = [2, 1, 3, 0][e]
                old = box[i]
                box[i] += shift if e in (1, 2) else -shift
                self.notes.append(f"Z nearly vanishes on the box edge near mu = "
                                  f"{_fmt_complex(exc.mu)}: edge moved from {float(old):g} "
                                  f"to {float(box[i]):g}")
        raise ContourError(last.mu, last.edge)

    def children(self, box, count):
        """The four quarters of a box with their counts (summing to count),
        or None when no split avoids the zeros."""
        re0, re1, im0, im1 = box
        for k, off in enumerate(SPLIT_OFFSETS):
            off2 = SPLIT_OFFSETS[(k + 2) % len(SPLIT_OFFSETS)]
            rm = re0 + (re1 - re0) * (Fraction(1, 2) + off)
            im = im0 + (im1 - im0) * (Fraction(1, 2) + off2)
            quads = [(re0, rm, im0, im), (rm, re1, im0, im), (re0, rm, im, im1),
                     (rm, re1, im, im1)]
            try:
                counts = [self.counter.count(q) for q in quads]
            except ContourError:
                continue
            if sum(counts) == count:
                return list(zip(quads, counts))
        return None

    def _inside(self, z, box):
        return box[0] <= z[0] <= box[1] and box[2] <= z[1] <= box[3]

    def _distinct(self, zeros, z, err):
        zc = _cplx(z)
        return all(abs(zc - _cplx(o[0])) > 10 * float(err + o[1]) + 1e-12 * float(self.size)
                   for o in zeros)

    def from_power_sums(self, box, count):
        """Zeros of a box holding ``count`` simple zeros: starting points from
        the power sums of the zeros (Delves & Lyness 1967), Newton's iteration
        from each. Returns the zeros if ``count`` distinct ones converge
        inside the box, else None."""
        try:
            _, sums = self.counter.count(box, moments=count)
        except ContourError:
            return None
        c = complex(float(box[0] + box[1]) / 2, float(box[2] + box[3]) / 2)
        r = float(max(box[1] - box[0], box[3] - box[2])) / 2
        starts = [c + r * w for w in _roots_from_power_sums(sums, count)]
        found = []
        for st in starts:
            if not np.isfinite(st):
                continue
            z0 = (_round_frac(Fraction(st.real), 6), _round_frac(Fraction(st.imag), 6))
            z, err, ok = _newton(self.ev, z0, 1, self.digits, self.limit)
            if ok and self._inside(z, box) and self._distinct(found, z, err):
                found.append((z, err))
        if len(found) == count:
            return [self._zero(z, err, 1) for z, err in found]
        return None

    def solve(self, box, count, depth=0):
        if count == 0:
            return []
        re0, re1, im0, im1 = box
        centre = ((re0 + re1) / 2, (im0 + im1) / 2)
        if count <= POWER_SUM_MAX:
            zeros = self.from_power_sums(box, count)
            if zeros is not None:
                return zeros
        if count > 1 and max(re1 - re0, im1 - im0) <= self.size * CLUSTER_BOX:
            # an N-fold zero or a tight cluster: Newton's iteration for an
            # N-fold zero from the centroid s_1 / N, then count in a tiny box
            try:
                _, sums = self.counter.count(box, moments=1)
                r = float(max(re1 - re0, im1 - im0)) / 2
                g = complex(float(centre[0]), float(centre[1])) + r * sums[0] / count
                start = (_round_frac(Fraction(g.real), 6), _round_frac(Fraction(g.imag), 6))
            except ContourError:
                start = centre
            z, err, ok = _newton(self.ev, start, count, self.digits, self.limit)
            if ok and self._inside(z, box):
                rt = max(self.size * Fraction(1, 10 ** 6), _frac(mpmath.mpf(1000 * err)))
                tiny = (z[0] - rt, z[0] + rt, z[1] - rt, z[1] + rt)
                try:
                    if self.counter.count(tiny) == count:
                        return [self._zero(z, max(err, mpmath.mpf(float(rt))), count)]
                except ContourError:
                    pass
        if depth >= MAX_DEPTH:
            self.notes.append(f"{count} zero(s) near {_fmt_complex(centre)} not separated")
            return [self._zero(centre, mpmath.mpf(float(max(re1 - re0, im1 - im0))), count,
                               converged=False)]
        kids = self.children(box, count)
        if kids is None:
            self.notes.append(f"the box around {_fmt_complex(centre)} could not be split "
                              "without passing through a zero")
            return [self._zero(centre, mpmath.mpf(float(max(re1 - re0, im1 - im0))), count,
                               converged=False)]
        out = []
        for sub, c in kids:
            out.extend(self.solve(sub, c, depth + 1))
        return out

    def with_edge_shifts(self, zeros):
        """The zeros with edge_shift: how far the leading endpoint terms of
        the integral, exp(p(b) + i mu b) / (p'(b) + i mu) at both ends
        (integration by parts, as in :func:`signfree.results.edge_error`),
        could move each zero, |endpoint terms| / |Z'(mu)|."""
        model = self.ev.model
        out = []
        for z in zeros:
            mu = (_frac(z.re), _frac(z.im))
            _, ds = self.ev._sums(mu, (Fraction(0), Fraction(0)), 1, self.ev.n_used,
                                  self.ev.prec)
            dz = engine.abs_mid(ds[0])
            total = mpmath.mpf(0)
            for end in model.domain:
                p = float(model.log_density(end)) - self.ev.shift
                dp = float(model.derivative(end))
                denom = abs(complex(dp - float(z.im), float(z.re))) or 1.0
                total += mpmath.exp(mpmath.mpf(p) - z.im * end) / denom
            shift = total / dz if dz > 0 else mpmath.inf
            spacing = min([abs(z.value - o.value) for o in zeros if o is not z] + [abs(z.value)])
            zz = Zero(re=z.re, im=z.im, err=z.err, multiplicity=z.multiplicity,
                      converged=z.converged, edge_shift=shift)
            object.__setattr__(zz, "_spacing", spacing)
            out.append(zz)
        return out

    @staticmethod
    def _zero(z, err, m, converged=True):
        return Zero(re=mpmath.mpf(z[0].numerator) / z[0].denominator,
                    im=mpmath.mpf(z[1].numerator) / z[1].denominator,
                    err=mpmath.mpf(err), multiplicity=m, converged=converged)


def find_zeros(model, box, digits=12):
    """Zeros of Z(mu) = Int exp(p(q) + i mu q) dq of a Chebyshev model in the
    box re0 <= Re mu <= re1, im0 <= Im mu <= im1 (see the module docstring
    for the method: the argument principle, recursive quartering, Newton's
    iteration). ``box`` is 're0:re1,im0:im1' or (re0, re1, im0, im1).
    Returns a :class:`ZeroResult`."""
    start = time.perf_counter()
    box = parse_box(box)
    with mpmath.workdps(max(30, digits + 10)):
        search = _Search(model, box, digits)
        used, count = search.count_top(box)
        zeros = search.with_edge_shifts(search.solve(used, count))
        zeros.sort(key=lambda z: (abs(z.value), z.re, z.im))
        found = sum(z.multiplicity for z in zeros)
        notes = list(dict.fromkeys(search.notes))
        if found != count:
            notes.append(f"{found} zero(s) refined, but the argument principle counts {count}")
        edgy = sum(1 for z in zeros if z.edge_limited)
        if edgy:
            notes.append(f"{edgy} zero(s) lie where the ends of the data range could move them "
                         f"by more than {int(EDGE_FRACTION * 100)}% of their distance to the "
                         "nearest other zero: they may be artefacts of the finite range "
                         "(column edge_shift)")
        re0, re1, im0, im1 = (mpmath.mpf(v.numerator) / v.denominator for v in used)
        inside0 = re0 < 0 < re1 and im0 < 0 < im1
        to_edge = min(-re0, re1, -im0, im1) if inside0 else None
        radius = min((abs(z.value) for z in zeros), default=None)
        note = None
        if radius is not None:
            if to_edge is not None and radius <= to_edge:
                lower = radius
            else:
                lower = to_edge
                note = (f"the box does not contain the disc |mu| < {_sci(radius, 6)}: zeros "
                        "closer to 0 may lie outside it, so the radius is an upper bound")
        else:
            lower = to_edge
            if to_edge is None:
                note = "no zeros in the box, and the box does not contain mu = 0"
    return ZeroResult(zeros=zeros, count=count, box=used, radius=radius,
                      radius_lower_bound=lower, note=note, notes=notes,
                      model=getattr(model, "label", ""), digits=digits,
                      evaluations=search.ev.evaluations,
                      seconds=time.perf_counter() - start)


def count_zeros(model, box, digits=12):
    """Only the argument-principle count of zeros of Z in the box (edges
    moved slightly where Z nearly vanishes on them): (count, box used)."""
    box = parse_box(box)
    search = _Search(model, box, digits)
    used, count = search.count_top(box)
    return count, used


def phase_factor(model, mu, digits=12):
    """Z(mu)/Z(0) of a Chebyshev model at one complex mu (a complex, an mpc
    or a pair), by the evaluator used for the zeros, as an mpmath mpc."""
    if isinstance(mu, tuple):
        re, im = mu
    else:
        mu = complex(mu) if not isinstance(mu, mpmath.mpc) else mu
        re, im = mu.real, mu.imag
    p = (_frac(re), _frac(im))
    ev = _Evaluator(model, (p[0] - 1, p[0] + 1, p[1] - 1, p[1] + 1), digits)
    want = int((digits + 2) * engine.LOG2_10)
    zero = (Fraction(0), Fraction(0))
    z, _ = ev.segment(p, zero, 1, want_bits=want)
    z0, _ = ev.segment(zero, zero, 1, want_bits=want)
    with mpmath.workdps(digits + 10):
        r = z[0] / z0[0]
        return mpmath.mpc(engine.to_mpf(r.real), engine.to_mpf(r.imag))


# ------------------------------------------------------------- symmetry

def partners(zero, parity="none"):
    """The zeros that symmetry adds to ``zero``: -conj(mu) for every real
    density (conj Z(mu) = Z(-conj mu)), and also -mu and conj(mu) for an
    even one (Z(-mu) = Z(mu))."""
    mus = [mpmath.mpc(-zero.re, zero.im)]
    if parity == "even":
        mus += [mpmath.mpc(-zero.re, -zero.im), mpmath.mpc(zero.re, -zero.im)]
    return [Zero(re=m.real, im=m.imag, err=zero.err, multiplicity=zero.multiplicity,
                 converged=zero.converged) for m in mus]


def with_partners(zeros, parity="none"):
    """``zeros`` completed by their symmetry partners (:func:`partners`),
    a partner left out where a listed zero lies within the errors of it."""
    out = list(zeros)
    for z in zeros:
        for p in partners(z, parity):
            if not any(abs(p.value - o.value) <= p.err + o.err + 1e-30 for o in out):
                out.append(p)
    out.sort(key=lambda z: (abs(z.value), z.re, z.im))
    return out


def unpaired(zeros, box, parity="none"):
    """Zeros whose symmetry partners lie in ``box`` but are not listed
    (a check of a search on a box symmetric about the imaginary axis)."""
    re0, re1, im0, im1 = (mpmath.mpf(float(v)) for v in parse_box(box))
    out = []
    for z in zeros:
        for p in partners(z, parity):
            if re0 < p.re < re1 and im0 < p.im < im1 and not any(
                    abs(p.value - o.value) <= 10 * (p.err + o.err) + 1e-30 for o in zeros):
                out.append(z)
                break
    return out


# ------------------------------------------------------------- command line

def add_zeros_parser(subparsers):
    """The ``zeros`` subcommand:
    signfree zeros INPUT --box re0:re1,im0:im1 [--out DIR] [--digits D] [--degree N]"""
    p = subparsers.add_parser("zeros", help="zeros of Z(mu) of the smoothed density in a box "
                              "of the complex mu plane")
    p.add_argument("input", help="CSV file (kind slopes, log_density, histogram or samples)")
    p.add_argument("--box", required=True, metavar="RE0:RE1,IM0:IM1",
                   help="the box of the complex mu plane, such as 0:3,-1:1 (write "
                   "--box=-3:3,-1:1 when it starts with a minus sign)")
    p.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted for each zero (default 12)")
    p.add_argument("--degree", type=int, help="Chebyshev degree (default: chosen from the errors)")
    from signfree.cli import add_input_options
    add_input_options(p)
    p.set_defaults(handler=cmd_zeros)
    return p


def zeros_files(args):
    """Read, fit, search and prepare zeros.csv and summary.json; raises
    InputError or ValueError on bad input before anything is written."""
    from signfree.analysis import check_digits
    from signfree.chebyshev import fit_chebyshev
    from signfree.output import csv_text, file_sha256, json_text, package_versions
    from signfree.samples import load

    digits = check_digits(getattr(args, "digits", 12))
    box = parse_box(args.box)
    density, samples, sample_notes = load(args.input, kind=getattr(args, "kind", None),
                                          symmetry=getattr(args, "symmetry", None))
    data = samples if samples is not None else density
    fit = fit_chebyshev(density, degree=getattr(args, "degree", None),
                        parity=getattr(args, "symmetry", None))
    result = find_zeros(fit.model, box, digits=digits)
    result.notes[:0] = sample_notes
    summary = {
        "input": {"file": str(args.input), "sha256": file_sha256(args.input),
                  "kind": data.kind, "metadata": data.metadata},
        **result.summary(),
        "degree": fit.model.degree, "parity": fit.model.parity,
        "degree_criterion": fit.criterion, "fit_notes": list(fit.notes),
        "evaluations": result.evaluations,
        "versions": package_versions(),
        "run_seconds": round(result.seconds, 3),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    files = {"zeros.csv": csv_text(ZeroResult.COLUMNS, result.records()),
             "summary.json": json_text(summary)}
    return result, fit, files


def cmd_zeros(args, out=None):
    """Run ``signfree zeros``; returns the exit status (2 on bad input, with
    one line on stderr and nothing written)."""
    from signfree.errors import InputError
    from signfree.output import new_folder_name, write_files
    out = out or sys.stdout
    try:
        result, fit, files = zeros_files(args)
    except (InputError, ValueError) as exc:
        sys.stderr.write(f"signfree: {exc}\n")
        return 2
    except ContourError as exc:
        sys.stderr.write(f"signfree: {exc}; try a slightly different --box\n")
        return 2
    folder = write_files(Path(args.out) if args.out else new_folder_name("signfree-zeros"),
                         files)
    print(f"{args.input}: model {fit.model.label} parity {fit.model.parity}", file=out)
    print(result.text(), file=out)
    print(f"wrote {folder / 'zeros.csv'} and {folder / 'summary.json'}", file=out)
    return 0
