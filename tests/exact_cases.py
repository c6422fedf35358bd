"""Densities whose Fourier transforms are known exactly, and measured data
drawn from them, for the checks of the error budget.

Every case gives ln rho(q) (double precision, for making data) and the
exact phase factor Z(mu)/Z(0) of the whole density (mpmath, any depth),
each from a published closed form:

  gaussian   Int exp(-a x^2) cos(b x) dx = sqrt(pi/a) exp(-b^2/(4a))
             (Gradshteyn & Ryzhik 3.896.4)
  mixture    a sum of Gaussians, term by term (the same formula)
  ripple     a Gaussian times exp(eps cos(w q + phi)); by the generating
             function exp((z/2)(t + 1/t)) = sum_n t^n I_n(z) (DLMF 10.35.1)
             with t = exp(i (w q + phi)), a sum of shifted Gaussians
             weighted by I_n(eps) (DLMF 10.25.2 for I_n)
  cauchy     rho = 1/(1 + (q/s)^2): exp(-s |mu|), the characteristic
             function of the Cauchy distribution (common practice; checked
             against mpmath.quadosc in test_exact_cases)
  loggamma   ln rho = a q - exp(q): Int exp(a q - e^q + i mu q) dq
             = Gamma(a + i mu) (DLMF 5.2.1 with t = e^q)
  rotors     V independent planar rotors, (I0(sqrt(b^2 - mu^2)) / I0(b))^V
             (DLMF 10.32.1); the density from signfree.scenarios

Data makers return signfree.density.Density values exactly as the reader
would build them from a file (the checks of reading are elsewhere).
"""
import math
from dataclasses import dataclass
from fractions import Fraction

import mpmath
import numpy as np

from signfree.density import Density


@dataclass(frozen=True)
class Case:
    """A density: ln rho (numpy, vectorised), its exact phase factor (a
    function of an mpmath mpf mu returning mpc), its natural scale and a
    label."""

    label: str
    log_rho: object
    exact: object
    centre: float
    width: float
    even: bool = False

    def exact_at(self, mu, dps=40):
        with mpmath.workdps(dps):
            m = mpmath.mpf(mu.numerator) / mu.denominator if isinstance(mu, Fraction) \
                else mpmath.mpf(mu)
            return self.exact(m)


def gaussian(sigma=1.0, centre=0.0):
    s2 = sigma * sigma
    return Case(f"gaussian(s={sigma:g},c={centre:g})",
                lambda q: -(np.asarray(q) - centre) ** 2 / (2 * s2),
                lambda mu: mpmath.exp(1j * mu * centre - mu * mu * mpmath.mpf(s2) / 2),
                centre, sigma, even=centre == 0)


def mixture(parts):
    """parts: [(weight, centre, sigma)], normalised weights of Gaussians."""
    total = sum(w for w, _, _ in parts)

    def log_rho(q):
        q = np.asarray(q, dtype=float)
        terms = [np.log(w / total) - (q - c) ** 2 / (2 * s * s) - np.log(s)
                 for w, c, s in parts]
        top = np.max(terms, axis=0)
        return top + np.log(sum(np.exp(t - top) for t in terms))

    def exact(mu):
        return sum(mpmath.mpf(w) / total * mpmath.exp(1j * mu * c - mu * mu * mpmath.mpf(s) ** 2 / 2)
                   for w, c, s in parts)

    centre = sum(w * c for w, c, _ in parts) / total
    spread = math.sqrt(sum(w * (s * s + (c - centre) ** 2) for w, c, s in parts) / total)
    even = all(any(abs(w2 - w) < 1e-12 and abs(c2 + c) < 1e-12 and abs(s2 - s) < 1e-12
                   for w2, c2, s2 in parts) for w, c, s in parts)
    return Case(f"mixture{parts}", log_rho, exact, centre, spread, even)


def ripple(sigma, eps, omega, phi=0.0, nmax=None):
    """A Gaussian of width sigma times exp(eps cos(omega q + phi))."""
    s2 = mpmath.mpf(sigma) ** 2

    def exact(mu):
        n_top = nmax or int(10 + 3 * abs(eps) + 2 * abs(eps) ** 0.5 * 10)
        num = den = mpmath.mpc(0)
        for n in range(-n_top, n_top + 1):
            w = mpmath.besseli(n, eps) * mpmath.exp(1j * n * phi)
            num += w * mpmath.exp(-(mu + n * omega) ** 2 * s2 / 2)
            den += w * mpmath.exp(-(n * omega) ** 2 * s2 / 2)
        return num / den

    return Case(f"ripple(s={sigma:g},eps={eps:g},w={omega:g},phi={phi:g})",
                lambda q: -np.asarray(q) ** 2 / (2 * sigma * sigma)
                + eps * np.cos(omega * np.asarray(q) + phi),
                exact, 0.0, sigma, even=phi == 0.0)


def cauchy(s=1.0):
    return Case(f"cauchy(s={s:g})", lambda q: -np.log1p((np.asarray(q) / s) ** 2),
                lambda mu: mpmath.exp(-s * abs(mu)) + 0j, 0.0, s, even=True)


def loggamma(a=30.0):
    """ln rho = a q - exp(q): mean psi(a) ~ ln a, variance psi'(a) ~ 1/a."""
    ga = mpmath.gamma(a)
    return Case(f"loggamma(a={a:g})", lambda q: a * np.asarray(q) - np.exp(np.asarray(q)),
                lambda mu: mpmath.gamma(a + 1j * mu) / mpmath.gamma(a) if ga else 0,
                math.log(a), 1 / math.sqrt(a))


# ------------------------------------------------------------------ data

def grid(case, half_range, n, centre=None):
    c = case.centre if centre is None else centre
    return np.linspace(c - half_range, c + half_range, n)


def log_density_data(case, q, noise, replicas=0, seed=0, stated=True):
    """ln rho on the grid q with Gaussian noise: ``replicas`` independent
    repetitions (each shifted by its own constant, as a Wang-Landau ln g), or
    one set with stated errors ``noise``."""
    rng = np.random.default_rng(seed)
    y = case.log_rho(q)
    y = y - y.max()
    if replicas >= 2:
        reps = np.array([y + rng.normal(0, noise, len(q)) + rng.normal(0, 5) for _ in range(replicas)])
        reps -= reps.mean(axis=1, keepdims=True)
        value = reps.mean(axis=0)
        err = reps.std(axis=0, ddof=1) / math.sqrt(replicas)
        return Density(kind="log_density", q=q, value=value, error=err, error_source="replicas",
                       replicas=reps, replica_labels=tuple(range(1, replicas + 1)))
    value = y + rng.normal(0, noise, len(q))
    return Density(kind="log_density", q=q, value=value,
                   error=np.full(len(q), noise) if stated else None,
                   error_source="stated" if stated else "none")


def slopes_data(case, lo, hi, width, noise, replicas=4, seed=0):
    """Interval-mean slopes (p(q_hi) - p(q_lo)) / width on [lo, hi] plus
    Gaussian noise, as Robbins-Monro / Wang-Landau slope estimates."""
    rng = np.random.default_rng(seed)
    n = int(round((hi - lo) / width))
    q = lo + width * (np.arange(n) + 0.5)
    exact = (case.log_rho(q + width / 2) - case.log_rho(q - width / 2)) / width
    w = np.full(n, width)
    if replicas >= 2:
        reps = np.array([exact + rng.normal(0, noise, n) for _ in range(replicas)])
        value = reps.mean(axis=0)
        err = reps.std(axis=0, ddof=1) / math.sqrt(replicas)
        return Density(kind="slopes", q=q, value=value, width=w, error=err,
                       error_source="replicas", replicas=reps,
                       replica_labels=tuple(range(1, replicas + 1)))
    return Density(kind="slopes", q=q, value=exact + rng.normal(0, noise, n), width=w,
                   error=np.full(n, noise), error_source="stated")


def bin_probabilities(case, edges, points=16):
    """Int over each bin of rho / Int over all bins (Gauss-Legendre on each
    bin in double precision; the density is smooth on the bin scale)."""
    x, w = np.polynomial.legendre.leggauss(points)
    lo, hi = edges[:-1], edges[1:]
    mid, half = (lo + hi) / 2, (hi - lo) / 2
    q = mid[:, None] + half[:, None] * x[None, :]
    lr = case.log_rho(q)
    top = lr.max()
    mass = (np.exp(lr - top) * w[None, :]).sum(axis=1) * half
    return mass / mass.sum()


def histogram_data(case, edges, count, replicas=0, seed=0):
    """Poisson counts of ``count`` expected samples in the bins."""
    rng = np.random.default_rng(seed)
    p = bin_probabilities(case, edges)
    q = 0.5 * (edges[1:] + edges[:-1])
    width = np.diff(edges)
    if replicas >= 2:
        reps = np.array([rng.poisson(count / replicas * p) for _ in range(replicas)], dtype=float)
        value = reps.sum(axis=0)
        return Density(kind="histogram", q=q, value=value, width=width, error=None,
                       error_source="poisson", replicas=reps,
                       replica_labels=tuple(range(1, replicas + 1)))
    value = rng.poisson(count * p).astype(float)
    return Density(kind="histogram", q=q, value=value, width=width, error=None,
                   error_source="poisson")


# ------------------------------------------------------------------ checks

def violations(table, case, factor=1.06):
    """The ok rows whose exact value lies outside
    factor x (quad + model + edge + 3 stat) plus half a unit of the last
    printed digit: [(mu, |error| / allowed)]."""
    out = []
    for r in table.rows:
        if r.status != "ok":
            continue
        exact = case.exact_at(r.mu)
        allowed = factor * (r.quad_err + (r.model_err or 0) + r.edge_err + 3 * (r.stat_err or 0))
        if r.last_digit is not None:
            allowed += mpmath.mpf(10) ** r.last_digit / 2
        miss = abs(mpmath.mpc(r.value) - exact)
        if miss > allowed:
            out.append((float(r.mu), float(miss / allowed) if allowed > 0 else math.inf))
    return out
