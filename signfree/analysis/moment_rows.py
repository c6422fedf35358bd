"""Weighted Fourier integrals of a Chebyshev model,

    N_O(mu) = Int O(q) rho(q) e^{i mu q} dq / Int rho(q) dq,

for a polynomial weight O, from the engine's coefficient-derivative rows
G_k(mu) = Int T_k(x) e^{p + i mu q} dq / Z(0) (``engine.transform(...,
gradient=ks)``): with q = mid + half x, O(q) = sum_k u_k T_k(x) exactly
(:func:`signfree.analysis.weights.in_window`), so N_O = sum_k u_k G_k and
G_0 = Z(mu)/Z(0).

Errors of N_O, absolute and on the scale of Z(0) like the engine's:
  rounding    the ball radii (rigorous)
  quadrature  the engine checks the rule on G_0 by refinement, and the rows
              G_k share that rule. By the Gauss-Legendre bound on the
              Bernstein ellipse E_rho (Trefethen, Approximation Theory and
              Approximation Practice, Thm 19.3), |I - I_n| <= (64/15) M(rho)
              rho^(-2n) / (rho^2 - 1), and |T_k| <= (rho^k + rho^-k)/2 on
              E_rho, so at the rho that minimises the bound for G_0 the bound
              for G_k is larger by A_k = (rho^k + rho^-k)/2 at most. The
              quadrature error of G_k is taken as A_k times the engine's
              quad_err of G_0 (an estimate of the same kind as the engine's).
  edge        the endpoint terms |O(e)| rho(e) / |p'(e) + i mu| at both ends e,
              relative to Z(0) (the leading term of integration by parts, as
              for Z itself).

Complex mu = mu_r + i nu: e^{-nu q} rho(q) is again a Chebyshev model,
c_1 -> c_1 - nu half (and a constant), so the same rows of the tilted model
at the real mu_r give every ratio at complex mu (:func:`tilted`).
"""
import dataclasses
import math
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache

import mpmath
import numpy as np
from flint import acb, arb, ctx, fmpq
from numpy.polynomial import chebyshev as C

from signfree import engine
from signfree.analysis.weights import evaluate


def require_chebyshev(model):
    if getattr(model, "integrand", None) != "chebyshev-exponent":
        raise ValueError("observables and imaginary or complex mu need the Chebyshev model "
                         "(--model chebyshev)")


def tilted(model, nu):
    """(model of rho(q) e^{-nu q} up to a constant, the nu it holds exactly):
    c_1 -> c_1 - nu half, rounded to a double; the second value is the exact
    tilt of the rounded coefficient, (c_1 - c_1') / half."""
    if nu == 0:
        return model, Fraction(0)
    a, b = model.domain
    half = (Fraction(b) - Fraction(a)) / 2
    coef = np.array(model.coef, dtype=float)
    if len(coef) < 2:
        coef = np.concatenate([coef, np.zeros(2 - len(coef))])
    c1 = Fraction(float(coef[1]))
    new = float(c1 - nu * half)
    coef[1] = new
    return (dataclasses.replace(model, coef=coef, parity="none"),
            (c1 - Fraction(new)) / half)


def _is_even(model):
    a, b = model.domain
    return a == -b and all(c == 0 for c in model.coef[1::2])


def _odd_companion(model):
    """The model with a negligible odd coefficient (2^-1000 in c_1): riding
    along in the batch, it keeps the engine off its even-model shortcut,
    which integrates against cos(mu q) only and so cannot give the rows of
    odd T_k."""
    coef = np.array(model.coef, dtype=float)
    coef[1] = 2.0 ** -1000
    return dataclasses.replace(model, coef=coef, parity="none")


@dataclass
class WeightRows:
    """The rows G_0..G_K of one model at real mus and what their errors need."""

    model: object
    mus: list            # exact fractions
    rows: list           # rows[k][i]: acb, G_k(mu_i)
    quad: list           # the engine's quad_err of G_0 per mu (mpf)
    resolved: list       # the engine reached the wanted digits of G_0
    prec: int
    nodes: int
    log_z0: float
    rho: list            # Bernstein-ellipse parameter per mu

    @property
    def order(self):
        return len(self.rows) - 1

    def integral(self, u, i):
        """sum_k u_k G_k(mu_i) for exact Chebyshev coefficients u."""
        if len(u) > len(self.rows):
            raise ValueError("weight of higher order than the rows computed")
        with ctx.workprec(self.prec + 32):
            total = acb(0)
            for k, c in enumerate(u):
                if c != 0:
                    total += arb(fmpq(c.numerator, c.denominator)) * self.rows[k][i]
            return total

    def quad_error(self, u, i):
        """Quadrature plus rounding error of :meth:`integral` (module docstring)."""
        rho = self.rho[i]
        err = mpmath.mpf(0)
        for k, c in enumerate(u):
            if c == 0:
                continue
            z = self.rows[k][i]
            amp = 0.5 * (rho ** k + rho ** -k)
            err += abs(mpmath.mpf(c.numerator) / c.denominator) * (
                mpmath.mpf(amp) * self.quad[i] + engine.upper(acb(z.real.rad(), z.imag.rad())))
        return err

    def edge_error(self, poly, i):
        """What the range can hide of Int O rho e^{i mu q}, relative to Z(0):
        at each end e, the tail of rho continued with its slope there,
        rho(e) sum_k |O^(k)(e)| / |alpha|^(k+1), alpha = |p'(e) + i mu| (the
        exact integral of O times the exponential continuation, which bounds
        a log-concave tail; for O = 1 the endpoint term of Z). |alpha| is
        kept at least 1 / (q_max - q_min), as for Z."""
        mu = float(self.mus[i])
        total = mpmath.mpf(0)
        for e, r, dp, floor_ in self._ends():
            alpha = max(math.hypot(dp, mu), floor_)
            total += r * sum(d / alpha ** (k + 1) for k, d in enumerate(_derivatives(poly, e)))
        return total

    def _ends(self):
        """(e, rho(e) / Z(0) as mpf, p'(e), floor of |alpha|) at both ends."""
        if not hasattr(self, "_end_data"):
            a, b = self.model.domain
            self._end_data = [
                (e, mpmath.exp(mpmath.mpf(float(self.model.log_density(e))) - self.log_z0),
                 float(self.model.derivative(e)), 1.0 / (b - a)) for e in (a, b)]
        return self._end_data


@lru_cache(maxsize=256)
def _derivatives(poly, e):
    """|O^(k)(e)| for k = 0, 1, ... (O a tuple of power-series coefficients)."""
    out, c = [], [float(x) for x in poly]
    while c:
        out.append(abs(evaluate(c, e)))
        c = [k * ck for k, ck in enumerate(c)][1:]
    return tuple(out)


def weight_rows(model, mus, order, digits):
    """:class:`WeightRows` G_0..G_order of a Chebyshev model at real mus, the
    rule checked by the engine to ``digits`` on G_0."""
    require_chebyshev(model)
    batch = [model]
    if order >= 1 and _is_even(model):
        batch.append(_odd_companion(model))
    tr = engine.transform(batch, mus, digits=digits, check_rows=1,
                          gradient=tuple(range(order + 1)))
    rows, _ = tr.gradient
    return WeightRows(model=model, mus=list(tr.mus), rows=rows, quad=list(tr.quad_err[0]),
                      resolved=list(tr.resolved), prec=tr.prec, nodes=tr.nodes,
                      log_z0=tr.log_z0[0], rho=bernstein_rho(model, tr.mus, tr.nodes))


def bernstein_rho(model, mus, n):
    """Per mu, the rho > 1 minimising the Gauss-Legendre bound
    ln M(rho) - 2 n ln rho - ln(rho^2 - 1) for exp(p(x) + i mu q) on the
    Bernstein ellipse E_rho (Trefethen, ATAP Thm 19.3), with M from 256
    points of the ellipse in double precision."""
    degree = max(len(model.coef) - 1, 1)
    top = min(6.0, 600.0 / degree)
    s = np.linspace(0.01, top, 160)
    theta = np.linspace(0.0, 2 * np.pi, 256, endpoint=False)
    z = np.exp(s)[:, None] * np.exp(1j * theta)[None, :]
    x = 0.5 * (z + 1.0 / z)
    with np.errstate(over="ignore", invalid="ignore"):
        re_p = C.chebval(x, np.asarray(model.coef, dtype=float)).real
    re_p = np.where(np.isfinite(re_p), re_p, np.inf)
    half = 0.5 * (model.domain[1] - model.domain[0])
    rest = -2.0 * n * s - np.log(np.expm1(2 * s))
    out = []
    for mu in mus:
        log_m = np.max(re_p - float(mu) * half * x.imag, axis=1)
        out.append(float(np.exp(s[int(np.argmin(log_m + rest))])))
    return out


def to_mpc(z):
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def radius(z):
    return engine.upper(acb(z.real.rad(), z.imag.rad()))
