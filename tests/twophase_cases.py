"""Two-phase densities with exact phase factors, and raw samples drawn from
them, for the checks of the rational and two-component models.

  valley(c, ...)   two Gaussians at -c and +c: the exact transform term by
                   term (Gradshteyn & Ryzhik 3.896.4, through
                   exact_cases.mixture); the valley between them is about
                   c^2 / (2 s^2) - ln 2 nats deep
  double_well      rho(q) = exp(V (a x^2 - x^4)), x = q / V: the phase
                   factor by python-flint's acb.integral (Petras' algorithm
                   in Arb; a rigorous enclosure, since the integrand is
                   entire) over a range beyond which the density is below
                   1e-(digits + depth + 20) of its peak
"""
import math
from functools import lru_cache

import mpmath
import numpy as np
from flint import acb, arb, ctx

import exact_cases as X
from signfree.io.samples import Samples, density_from_samples


def valley(c, sigma=1.0, weights=(0.5, 0.5), shift=0.0):
    """Two Gaussians of width sigma at shift -+ c (exact_cases.mixture)."""
    return X.mixture([(weights[0], shift - c, sigma), (weights[1], shift + c, sigma)])


def valley_depth(case, q):
    """The depth of the valley of ln rho on the grid q, in nats."""
    v = case.log_rho(q)
    left = np.maximum.accumulate(v)
    right = np.maximum.accumulate(v[::-1])[::-1]
    return float(np.max(np.minimum(left, right) - v))


def sech_pair(parts):
    """rho = sum_i w_i sech((q - c_i) / s_i) / (pi s_i): two peaks with
    exponential tails, whose ln rho is not a polynomial either within a
    component or as a whole. Int sech(q / s) exp(i mu q) dq =
    pi s sech(pi s mu / 2) (Gradshteyn & Ryzhik 3.981.3), term by term."""
    total = sum(w for w, _, _ in parts)

    def log_rho(q):
        q = np.asarray(q, dtype=float)
        terms = []
        for w, c, s in parts:
            x = np.abs((q - c) / s)
            terms.append(np.log(w / (np.pi * s)) + np.log(2.0) - x - np.log1p(np.exp(-2 * x)))
        return np.logaddexp.reduce(terms, axis=0)

    def exact(mu):
        return sum(mpmath.mpf(w) / total * mpmath.exp(1j * mu * c) * mpmath.sech(mpmath.pi * s * mu / 2)
                   for w, c, s in parts)

    centre = sum(w * c for w, c, _ in parts) / total
    return X.Case(f"sech_pair{parts}", log_rho, exact, centre,
                  max(abs(c - centre) for _, c, _ in parts) + max(s for _, _, s in parts))


def double_well(V, a=1.0):
    """rho = exp(V (a x^2 - x^4)), x = q / V, with certified references."""
    x0 = math.sqrt(a / 2)
    sigma = math.sqrt(V / (4 * a))         # -1 / (ln rho)'' at a peak

    def log_rho(q):
        x = np.asarray(q, dtype=float) / V
        return V * (a * x * x - x ** 4)

    @lru_cache(maxsize=None)
    def certified(mu_text, dps):
        mu = mpmath.mpf(mu_text)
        depth = float(mu) ** 2 * sigma ** 2 / (2 * math.log(10)) + 5
        prec = int((dps + depth + 30) * 3.33) + 64
        # tail: V (x^4 - a x^2) above (dps + depth + 20) ln 10 past x_r
        need = (dps + depth + 20) * math.log(10) / V
        xr = math.sqrt(a / 2 + math.sqrt(a * a / 4 + need)) + 0.05
        with ctx.workprec(prec):
            Va, lim = arb(V), arb(xr * V)

            def integral(m):
                def f(q, _):
                    x2 = (q / Va) ** 2
                    return (Va * (arb(a) * x2 - x2 * x2) + acb(0, 1) * m * q).exp()
                return acb.integral(f, -lim, lim, rel_tol=arb(2) ** (-prec + 20))

            r = integral(arb(mpmath.nstr(mu, dps + 10))) / integral(arb(0))
            with mpmath.workdps(dps + 10):
                return mpmath.mpc(mpmath.mpf(r.real.mid().str(dps + 5, radius=False)),
                                  mpmath.mpf(r.imag.mid().str(dps + 5, radius=False)))

    def exact(mu):
        return certified(mpmath.nstr(mu, mpmath.mp.dps + 5), mpmath.mp.dps)

    return X.Case(f"double_well(V={V:g},a={a:g})", log_rho, exact, 0.0, V * x0, even=True)


def sampled(case, lo, hi, count, seed=0, replicas=0):
    """Raw samples of q from the density on [lo, hi] (inverse transform
    sampling on a fine grid, exact to the grid's resolution), as the
    histogram the command line makes of a samples file."""
    rng = np.random.default_rng(seed)
    q = np.linspace(lo, hi, 200001)
    v = case.log_rho(q)
    p = np.exp(v - v.max())
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (p[1:] + p[:-1]) * np.diff(q))])
    cdf /= cdf[-1]
    x = np.interp(rng.random(count), cdf, q)
    labels = None if replicas < 2 else np.repeat(np.arange(1, replicas + 1),
                                                 -(-count // replicas))[:count]
    density, _ = density_from_samples(Samples(q=x, replicas=labels))
    return density
