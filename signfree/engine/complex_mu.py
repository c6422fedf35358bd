"""Z(mu) and Z'(mu) = i Int q rho exp(i mu q) dq of a Chebyshev model at
complex mu, with the precision and node count kept adequate: the evaluator
behind the zeros of Z and the convergence radius of the cumulant series.

Gauss-Legendre nodes on the domain and ln rho at the nodes
(:mod:`signfree.engine.rules`), sums in Arb ball arithmetic (Johansson, IEEE
Trans. Computers 2017). Along a straight segment mu_k = a + k h the
exponentials factorise, exp(i mu_{aB+b} q) = exp(i (a + aBh) q) exp(i b h q),
and the sums are one ball matrix product. The precision is raised until the
balls carry the accuracy needed (the cancellation depth at each mu is read
off the radii); the node count until an n- and a 1.5 n-point rule agree at
probe points, relative to Int |integrand| (Trefethen, Approximation Theory
and Approximation Practice, ch. 19).
"""
import math
from fractions import Fraction

import mpmath
import numpy as np
from flint import acb, acb_mat, arb, arb_mat, ctx, fmpq

from signfree.engine.balls import LOG2_10, MAX_NODES, MAX_PREC, abs_mid, precision_bits, to_mpf, upper
from signfree.engine.rules import chebyshev_at_nodes, gauss_legendre_rule

PHASE_BITS = 30            # relative accuracy of Z wanted while counting


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
    m = abs_mid(z)
    return -math.inf if m == 0 else float(mpmath.log(m))



class Evaluator:
    """Z(mu) and Z'(mu) of one Chebyshev model at complex mu (pairs of
    Fractions), with the precision and node count kept adequate."""

    def __init__(self, model, box, digits, use_path=True):
        if getattr(model, "integrand", None) != "chebyshev-exponent":
            raise TypeError("Z at complex mu is evaluated for Chebyshev models of ln rho")
        self.model = model
        self.box, self.digits, self.twin = box, digits, None
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
        # a box far from Re mu = 0 is integrated along one path through the
        # saddle region (signfree.engine.paths): there the sums do not cancel
        # over the depth; the node count n then scales the planned panels (n / 32)
        self.path = None
        planned = self._path((re0, re1, im0, im1), depth, digits) if use_path else None
        if planned is not None:
            self.path, ratio = planned
            depth = max(ratio, 0.0) / math.log(10)
            if self.path is not None:
                self.n = 32
            else:   # the real axis, with the depth of the plan (it sees several peaks)
                self.n = _ladder(int(16 + 0.35 * mu_max * self.half + 0.3 * math.sqrt(
                    2.3 * (depth + digits + 5) / var) * self.half))
        self.prec = precision_bits(depth, 10, float(np.abs(p).max()), self.n)
        self.cache = {}
        self.eps = {}
        self.probes = [(_frac(r), _frac(i)) for r in (re0, 0.5 * (re0 + re1), re1)
                       for i in (im0, 0.5 * (im0 + im1), im1)]
        self.evaluations = 0

    def _path(self, box, depth, digits):
        """(the common path for the box or None for the real axis, the
        planned cancellation on it in nats), or None when the box is too
        shallow to plan. A box that straddles Re mu = 0 (where the saddle
        changes side) stays on the real axis."""
        from signfree.engine import paths
        re0, re1, im0, im1 = box
        if depth * math.log(10) <= paths.ALLOWANCE:
            return None
        probes = [complex(r, i) for r in np.linspace(re0, re1, 5)
                  for i in (im0, 0.5 * (im0 + im1), im1)]
        group = paths.plan(self.coef, self.domain, probes, digits + 4, common=True,
                           force_real=re0 * re1 <= 0)[0]
        return (group.path if group.path.height != 0 else None), max(group.log_ratio)

    @property
    def n_used(self):
        return self._next(self.n)

    @staticmethod
    def _next(n):
        return _ladder((3 * n + 1) // 2)

    def _path_nodes(self, n, prec):
        """Nodes, weights and ln |weights| along the planned path, every
        panel's node count scaled by n / 32."""
        from signfree.engine.path_sums import chebyshev_table, path_nodes, _log10_abs
        xs, wx = path_nodes(self.path, n / 32, prec)
        Tre, Tim = chebyshev_table(xs, len(self.coef) - 1, prec)
        with ctx.workprec(prec):
            cm = arb_mat([[arb(c) for c in self.coef]])
            Pre, Pim = cm * Tre, cm * Tim
            shift = arb(self.shift)
            a, b = arb(self.domain[0]), arb(self.domain[1])
            half, mid = (b - a) / 2, (a + b) / 2
            qs = [mid + half * x for x in xs]
            W = [half * w * acb(Pre[0, j] - shift, Pim[0, j]).exp() for j, w in enumerate(wx)]
            Wq = [wj * qj for wj, qj in zip(W, qs)]
        logw = np.array([_log10_abs(w) * math.log(10) for w in W])
        qf = np.array([complex(float(q.real.mid()), float(q.imag.mid())) for q in qs])
        return qs, W, Wq, logw, qf

    def nodes(self, n, prec):
        key = (n, prec)
        if key not in self.cache and self.path is not None:
            if len(self.cache) > 12:
                self.cache.pop(next(iter(self.cache)))
            self.cache[key] = self._path_nodes(n, prec)
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

    def log_scale(self, mu, n):
        """ln Int |exp(p + i mu q)| dq (over the nodes), up to the common
        shift; ``mu`` a complex pair (or, on the real axis, its imaginary part)."""
        _, _, _, logw, qf = self.nodes(n, self.prec)
        re, im = (float(mu[0]), float(mu[1])) if isinstance(mu, tuple) else (0.0, float(mu))
        # |exp(i mu q)| = exp(-Re mu Im q - Im mu Re q)
        t = logw - im * np.real(qf) - re * np.imag(qf)
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
                diff = upper(z0[0] - z1[0])
                ls = self.log_scale(p, n1)
                rel = -math.inf if diff == 0 else float(mpmath.log(diff)) - ls
                worst = max(worst, math.exp(min(max(rel, -700.0), 700.0)))
            self.eps[n] = worst
        return self.eps[n]

    def _outside(self, points):
        """True when a path is in use and a point lies outside the box (with
        a margin of a tenth of its size): the path and its quadrature checks
        were made for the box only."""
        if self.path is None:
            return False
        re0, re1, im0, im1 = (float(v) for v in self.box)
        dr, di = 0.1 * (re1 - re0) + 1e-9, 0.1 * (im1 - im0) + 1e-9
        return any(not (re0 - dr <= float(r) <= re1 + dr and im0 - di <= float(i) <= im1 + di)
                   for r, i in points)

    def _axis(self):
        """The same model along the real axis (for points outside the box)."""
        if self.twin is None:
            self.twin = Evaluator(self.model, self.box, self.digits, use_path=False)
        return self.twin

    def segment(self, start, step, count, want_bits=PHASE_BITS):
        """(Z_k, Z'_k) on a segment with relative accuracy 2^-want_bits of
        each Z_k (rounding and quadrature); raises ContourError where that
        cannot be reached because Z_k is (nearly) zero."""
        if self._outside([start, _point(start, step, count - 1)]):
            return self._axis().segment(start, step, count, want_bits)
        tries = 0
        while True:
            tries += 1
            N = self.n_used
            zs, ds = self._sums(start, step, count, N, self.prec)
            worst = min(z.rel_accuracy_bits() for z in zs)
            if worst < want_bits:
                k = min(range(count), key=lambda i: zs[i].rel_accuracy_bits())
                if self.prec >= MAX_PREC or tries > 8:
                    raise ContourError(_point(start, step, k))
                self.prec = min(MAX_PREC,
                                int(self.prec + want_bits - max(worst, -self.prec) + 64)
                                // 64 * 64)
                continue
            eps = self._quad_eps(self.n)
            bad = None
            for k, z in enumerate(zs):
                mu = _point(start, step, k)
                if math.log(max(eps, 1e-300)) + self.log_scale(mu, N) - _log_abs(z) \
                        > -want_bits * math.log(2):
                    bad = mu
                    break
            if bad is None:
                return zs, ds
            if self.n_used > MAX_NODES or tries > 12:
                raise ContourError(bad)
            self.probes.append(bad)
            self.eps.pop(self.n, None)
            if self._quad_eps(self.n) == eps:
                self.n = self.n_used

    def point_for_newton(self, mu, digits, scale):
        """(Z, Z', error bound of Z) at mu with the absolute error of Z below
        10^-(digits+2) * scale * |Z'|, so that the Newton step is good to
        ``digits`` digits of ``scale``."""
        if self._outside([mu]):
            return self._axis().point_for_newton(mu, digits, scale)
        zero = (Fraction(0), Fraction(0))
        for _ in range(16):
            N = self.n_used
            zs, ds = self._sums(mu, zero, 1, N, self.prec)
            z, d = zs[0], ds[0]
            if d.rel_accuracy_bits() < 20:
                self.prec = min(MAX_PREC, self.prec * 2 // 64 * 64)
                continue
            target = mpmath.mpf(10) ** (-(digits + 2)) * scale * abs_mid(d)
            rad = upper(acb(z.real.rad(), z.imag.rad()))
            if rad > target and self.prec < MAX_PREC:
                extra = float(mpmath.log(rad / target, 2)) + 32
                self.prec = min(MAX_PREC, int(self.prec + extra + 63) // 64 * 64)
                continue
            quad = mpmath.mpf(self._quad_eps(self.n)) * mpmath.exp(self.log_scale(mu, N))
            if quad > target and self.n_used <= MAX_NODES:
                self.probes.append(mu)
                self.eps.pop(self.n, None)
                if mpmath.mpf(self._quad_eps(self.n)) * mpmath.exp(self.log_scale(mu, N)) \
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


def phase_factor(model, mu, digits=12):
    """Z(mu)/Z(0) of a Chebyshev model at one complex mu (a complex, an mpc
    or a pair), by the evaluator used for the zeros, as an mpmath mpc."""
    if isinstance(mu, tuple):
        re, im = mu
    else:
        mu = complex(mu) if not isinstance(mu, mpmath.mpc) else mu
        re, im = mu.real, mu.imag
    p = (_frac(re), _frac(im))
    ev = Evaluator(model, (p[0] - 1, p[0] + 1, p[1] - 1, p[1] + 1), digits)
    want = int((digits + 2) * LOG2_10)
    zero = (Fraction(0), Fraction(0))
    z, _ = ev.segment(p, zero, 1, want_bits=want)
    # Z(0) on the real axis, with the same normalisation (the model's shift)
    z0, _ = Evaluator(model, (-1, 1, -1, 1), digits).segment(zero, zero, 1, want_bits=want)
    with mpmath.workdps(digits + 10):
        r = z[0] / z0[0]
        return mpmath.mpc(to_mpf(r.real), to_mpf(r.imag))

