"""Weighted nonlinear least squares for the smoothing models that are not
linear in their parameters (the rational model of the slope, the
two-component model): the data in the measured quantity, the solution by
the Levenberg-Marquardt method (through scipy.optimize.least_squares), the
parameter covariance from the Jacobian at
the solution, and the choice of order by the same chi^2 criterion as the
Chebyshev fit.

A model form is described by ``evaluate(q, theta, jacobian) -> (ln rho,
d ln rho / d theta or None)`` in double precision. Slopes are fitted as interval means
(L(q_hi) - L(q_lo)) / width, so that their independent errors stay
independent; ln rho on a grid (log densities, histograms corrected to bin
integrals) is fitted as L(q) + C with a free constant C, the last parameter.
"""
import math
import warnings
from dataclasses import dataclass

import numpy as np

from signfree.models.chebyshev import P_ACCEPT, SPIKE_LIMIT, chi2_sf
from signfree.models.shape import spurious_weight

MAX_FRACTION = 0.6      # at most this share of the data points as parameters
PATIENCE = 8            # candidates tried past the last fall of AIC when none passes


class Measured:
    """The data as they are fitted, with the errors ``sigma`` that weight
    them; ``correction`` turns histogram bin averages into values of ln rho
    at the bin centres (:func:`signfree.models.shape.bin_correction`).

    Empty histogram bins have no logarithm, but they say that the model may
    not expect counts there: each adds its Poisson deviance for a count of
    0, 2 lambda (lambda = width exp(ln rho + C + correction), the counts the
    model expects in it), to chi^2, as the residual sqrt(2 lambda) (the
    deviance of a Poisson fit; McCullagh & Nelder, Generalized Linear
    Models, 1989, 2.3). Without it a flexible model may put weight where no
    sample fell. The degrees of freedom count the filled bins only."""

    def __init__(self, density, sigma, correction=None):
        self.kind = density.kind
        self.empty = None
        if density.kind == "histogram" and np.any(density.value <= 0):
            gone = density.value <= 0
            width = density.width if density.width is not None else np.ones(density.n_points)
            corr = np.asarray(correction)[gone] if correction is not None else 0.0
            self.empty = (density.q[gone], np.log(width[gone]) + corr)
        if density.kind == "slopes":
            self.lo = density.q - density.width / 2
            self.hi = density.q + density.width / 2
            self.width = density.width
            self.y = np.asarray(density.value, dtype=float)
        else:
            q, y, _ = density.log_density_points()
            if correction is not None and density.kind == "histogram":
                y = y - np.asarray(correction)[density.value > 0]
            self.lo, self.hi, self.width = q, None, None
            self.y = np.asarray(y, dtype=float)
        self.sigma = np.asarray(sigma, dtype=float)
        self.free_constant = density.kind != "slopes"

    @property
    def n(self):
        return len(self.y)

    def extra(self):
        """Parameters the data add to a form (the free constant of ln rho)."""
        return 1 if self.free_constant else 0

    def predict(self, evaluate, theta, jacobian=True):
        """(prediction in the measured quantity, its Jacobian or None)."""
        p = len(theta) - self.extra()
        core = theta[:p]
        value, jac = evaluate(self.lo, core, jacobian)
        if self.hi is not None:
            v_hi, j_hi = evaluate(self.hi, core, jacobian)
            return ((v_hi - value) / self.width,
                    (j_hi - jac) / self.width[:, None] if jacobian else None)
        if not jacobian:
            return value + theta[-1], None
        return value + theta[-1], np.hstack([jac, np.ones((len(value), 1))])

    def design(self, columns):
        """The columns of a model linear in its parameters, ``columns(q)``
        in ln rho, turned into the measured quantity (the free constant's
        column appended for ln rho data)."""
        low = columns(self.lo)
        if self.hi is not None:
            return (columns(self.hi) - low) / self.width[:, None]
        return np.hstack([low, np.ones((len(low), 1))])

    def _empty_terms(self, evaluate, theta, jacobian):
        """sqrt(2 lambda) per empty bin and its Jacobian (or None)."""
        q, offset = self.empty
        value, jac = evaluate(q, theta[:len(theta) - 1], jacobian)
        r = np.sqrt(2.0) * np.exp(np.minimum(0.5 * (value + theta[-1] + offset), 300.0))
        if not jacobian:
            return r, None
        return r, 0.5 * r[:, None] * np.hstack([jac, np.ones((len(q), 1))])

    def residuals(self, evaluate, theta):
        r = (self.predict(evaluate, theta, False)[0] - self.y) / self.sigma
        if self.empty is None:
            return r
        return np.concatenate([r, self._empty_terms(evaluate, theta, False)[0]])

    def weighted_jacobian(self, evaluate, theta):
        J = self.predict(evaluate, theta)[1] / self.sigma[:, None]
        if self.empty is None:
            return J
        return np.vstack([J, self._empty_terms(evaluate, theta, True)[1]])

    def empty_deviance(self, model):
        """The Poisson deviance of the empty bins, sum 2 lambda, for any
        model of ln rho (its constant matched to the filled bins by their
        weighted mean offset); 0 without empty bins."""
        if self.empty is None:
            return 0.0
        w = 1 / self.sigma ** 2
        c = float(np.sum(w * (self.y - model.log_density(self.lo))) / np.sum(w))
        q, offset = self.empty
        return float(np.sum(2 * np.exp(np.minimum(model.log_density(q) + c + offset, 700.0))))

    def start_constant(self, evaluate, core):
        """The free constant that best matches the data for given core
        parameters (the weighted mean offset)."""
        if not self.free_constant:
            return np.asarray(core, dtype=float)
        value, _ = evaluate(self.lo, core, False)
        w = 1 / self.sigma ** 2
        c = float(np.sum(w * (self.y - value)) / np.sum(w))
        return np.concatenate([core, [c]])


@dataclass(frozen=True)
class Solution:
    """A least-squares solution: the parameters (core and, for ln rho data,
    the constant), chi^2 (times the fit's chi^2 scale), degrees of freedom,
    and a factor L of the parameter covariance L L^T."""

    theta: np.ndarray
    chi2: float
    dof: int
    factor: np.ndarray
    converged: bool

    @property
    def n_params(self):
        return len(self.theta)

    @property
    def p_value(self):
        return chi2_sf(self.chi2, self.dof)

    @property
    def aic(self):
        """Akaike's information criterion chi^2 + 2 k (Akaike, IEEE Trans.
        Autom. Control 19 (1974) 716)."""
        return self.chi2 + 2 * self.n_params


def solve(measured, evaluate, theta0, chi2_scale=1.0, max_evaluations=None):
    """Weighted least squares from ``theta0`` (Levenberg-Marquardt); None
    when the start cannot be evaluated."""
    from scipy.optimize import least_squares
    theta0 = np.asarray(theta0, dtype=float)
    with np.errstate(all="ignore"):
        if not np.all(np.isfinite(measured.residuals(evaluate, theta0))):
            return None
    method = "lm" if measured.n >= len(theta0) else "trf"
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        try:
            out = least_squares(lambda t: measured.residuals(evaluate, t), theta0,
                                jac=lambda t: measured.weighted_jacobian(evaluate, t),
                                method=method, xtol=1e-9, ftol=1e-9, gtol=1e-10,
                                max_nfev=max_evaluations or 20 * (len(theta0) + 1))
        except (ValueError, OverflowError, np.linalg.LinAlgError, FloatingPointError):
            return None
    if not np.all(np.isfinite(out.x)) or not np.all(np.isfinite(out.fun)):
        return None
    chi2 = float(out.fun @ out.fun) * chi2_scale
    return Solution(theta=out.x, chi2=chi2, dof=measured.n - len(out.x),
                    factor=covariance_factor(out.jac), converged=out.status > 0)


def covariance_factor(weighted_jacobian):
    """L with L L^T = (J^T J)^-1, the covariance of the parameters of a
    weighted least-squares fit in the linear approximation at the solution,
    from the QR factorisation of the column-scaled Jacobian (Golub & Van
    Loan, Matrix Computations, 5.3); directions the data do not constrain
    (singular values below 1e-10 of the largest) get no spread here and are
    left to the model error."""
    J = np.asarray(weighted_jacobian, dtype=float)
    scale = np.sqrt((J * J).sum(axis=0))
    scale[scale == 0] = 1.0
    _, s, vt = np.linalg.svd(J / scale, full_matrices=False)
    keep = s > 1e-10 * s[0]
    return (vt[keep].T / s[keep]) / scale[:, None]


def remembered(owner, q, make):
    """make() for the array q, remembered on ``owner`` for the last two
    arrays it was asked for (the fits evaluate the same abscissae, interval
    ends for slopes, many times); the arrays are held, so identity is safe."""
    store = owner.__dict__.setdefault("_remembered", [])
    for arr, value in store:
        if arr is q:
            return value
    value = make()
    store.append((q, value))
    del store[:-2]
    return value


def max_parameters(n_points):
    """The most parameters a candidate may have: at most 60% of the data
    points, and at least one degree of freedom left (as for the Chebyshev
    candidates)."""
    return min(n_points - 1, max(3, int(MAX_FRACTION * n_points)))


@dataclass
class Candidate:
    """One order of a model form: its key (e.g. (pairs, degree)), the
    number of parameters, and how to fit it."""

    key: tuple
    n_params: int
    fit: object          # () -> (model, Solution) or None
    result: object = None
    tried: bool = False

    def get(self):
        if not self.tried:
            self.tried = True
            self.result = self.fit()
        return self.result


def choose_order(candidates, density, neighbour_keys):
    """The smallest candidate (by parameter count) whose chi^2 is consistent
    with the errors, P(chi^2_dof >= chi^2) >= 0.05, and whose shape puts no
    more than SPIKE_LIMIT of its weight where the data do not allow it
    (:func:`signfree.models.shape.spurious_weight`); if none is, the minimum
    of AIC among the shapely candidates tried, flagged as inconsistent (the
    search stops when AIC has not fallen for PATIENCE candidates). Returns
    (chosen candidate, the first two of ``neighbour_keys(key)`` that could be
    fitted, consistent, criterion, spurious fraction and excess of the
    chosen)."""
    ordered = sorted(candidates, key=lambda c: (c.n_params, c.key))
    by_key = {c.key: c for c in ordered}
    shape = {}

    def spikes(c):
        if c.key not in shape:
            shape[c.key] = spurious_weight(density, c.get()[0])
        return shape[c.key]

    def passes(c):
        res = c.get()
        return res is not None and res[1].p_value >= P_ACCEPT and spikes(c)[0] <= SPIKE_LIMIT

    chosen, best, since = None, math.inf, 0
    for c in ordered:
        if passes(c):
            chosen = c
            break
        res = c.get()
        if res is not None and res[1].aic < best - 1:
            best, since = res[1].aic, 0
        else:
            since += 1
        if since >= PATIENCE:
            break          # AIC has stopped falling: more parameters do not help
    consistent = chosen is not None
    criterion = "fewest parameters with P(chi2) >= 0.05 and no spurious weight"
    if chosen is None:
        fitted = [c for c in ordered if c.tried and c.get() is not None]
        if not fitted:
            return None, [], False, "no candidate could be fitted", (math.inf, math.inf)
        tame = [c for c in fitted if spikes(c)[0] <= SPIKE_LIMIT] or fitted
        chosen = min(tame, key=lambda c: c.get()[1].aic)
        criterion = "no order consistent with the errors; minimum of AIC"
    neighbours = []
    for key in neighbour_keys(chosen.key):
        c = by_key.get(key)
        if c is not None and c.get() is not None and len(neighbours) < 2:
            neighbours.append(c)
    return chosen, neighbours, consistent, criterion, spikes(chosen)


DIFFERENCE_STEP = 0.1    # of one standard deviation along each principal axis


def sensitivity_models(solution, rebuild, step=DIFFERENCE_STEP):
    """Models at theta +- step L_i for every column L_i of the covariance
    factor (in that order: plus, minus, per axis). Central differences of
    Z(mu) between them, divided by 2 step, are its changes per standard
    deviation along the principal axes, whose squares summed give the
    linearly propagated variance (common practice; the small step keeps
    parameters the data hardly fix from leaving the linear regime).
    ``rebuild(theta)`` makes a model from parameters."""
    L = solution.factor
    out = []
    for i in range(L.shape[1]):
        out.append(rebuild(solution.theta + step * L[:, i]))
        out.append(rebuild(solution.theta - step * L[:, i]))
    return out
