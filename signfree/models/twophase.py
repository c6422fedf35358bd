"""Two-phase densities: where the data show two peaks, and the model of rho
as the sum of two smooth single-peak components,

    rho(q) = exp(P_1(x)) + exp(P_2(x)),   ln rho = logaddexp(P_1, P_2),

each P_i a Chebyshev series on the data domain (x the window coordinate),
fitted jointly by weighted nonlinear least squares with the stated errors
(:mod:`signfree.models.nonlinear`). At a first-order transition each phase
contributes one near-Gaussian peak; their sum is entire, and so is each
component, so the Fourier integral is the weighted sum of two Chebyshev
transforms, each with its own Z(0) as weight. Degrees (d_1, d_2) are the
pair with the fewest parameters whose chi^2 passes, P(chi^2) >= 0.05; the
neighbours (d_1 + 1, d_2) and (d_1, d_2 + 1) give the model error. With
even parity the components are mirror images, P_2(x) = P_1(-x).

Where the data show two peaks (:func:`find_valley`): the deepest valley of
ln rho between two maxima, with its depth in units of the error of that
depth (the points' errors for ln rho; the slope errors summed over the
intervals between valley and peak for slopes).
"""
import math
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import chebyshev as C

from signfree.density import slope_knots
from signfree.models.chebyshev import ChebyshevModel
from signfree.models.nonlinear import Candidate, Measured, choose_order, \
    max_parameters, remembered, sensitivity_models, solve

MAX_DEGREE = 6          # per component: a smooth single peak needs no more
VALLEY_SIGMAS = 5.0     # a valley must be this many errors deep to count
VALLEY_NATS = 0.5       # and at least this deep in ln rho


def profile(density):
    """(q, ln rho, error of ln rho relative to the first point) from the
    data alone: the slope reconstruction for slopes (errors summed along
    the intervals), ln rho itself for log densities, ln((count + 1/2) /
    width) for histograms with empty bins kept (error 1 where the count is
    0 or 1; common practice)."""
    if density.kind == "slopes":
        knots, values, _ = slope_knots(density.q, density.width, density.value)
        err = density.error if density.error is not None else np.zeros(density.n_points)
        steps = np.concatenate([[0.0], np.cumsum((density.width * err) ** 2)])
        n = min(len(knots), len(steps))
        return knots[:n], values[:n], np.sqrt(steps[:n])
    if density.kind == "histogram":
        width = density.width if density.width is not None else np.ones(density.n_points)
        counts = density.value
        return (density.q, np.log((counts + 0.5) / width),
                1.0 / np.sqrt(np.maximum(counts, 1.0)))
    err = density.error if density.error is not None else np.zeros(density.n_points)
    return density.q, density.value, err


def find_valley(density):
    """The deepest valley of ln rho between two maxima of the data, as a
    dict (peaks, valley position, depth in nats, depth in errors,
    significant) or None when ln rho has no interior minimum below both
    sides. The depth is the lower peak minus the valley."""
    q, v, e = profile(density)
    if len(q) < 5:
        return None
    left = np.maximum.accumulate(v)
    right = np.maximum.accumulate(v[::-1])[::-1]
    depth = np.minimum(left, right) - v
    k = int(np.argmax(depth))
    if depth[k] <= 0 or k == 0 or k == len(v) - 1:
        return None
    i = int(np.argmax(v[:k + 1]))
    j = k + int(np.argmax(v[k:]))
    low = i if v[i] <= v[j] else j
    if density.kind == "slopes":
        err = abs(e[k] ** 2 - e[low] ** 2) ** 0.5
    else:
        err = math.hypot(e[k], e[low])
    sigmas = depth[k] / err if err > 0 else math.inf
    return {"peaks": [float(q[i]), float(q[j])], "valley": float(q[k]),
            "depth_nats": float(depth[k]), "depth_sigmas": float(sigmas),
            "significant": bool(sigmas >= VALLEY_SIGMAS and depth[k] >= VALLEY_NATS)}


@dataclass(frozen=True)
class TwoComponentModel:
    """rho = exp(P_1) + exp(P_2) with both P_i Chebyshev series on one
    domain (:class:`~signfree.models.chebyshev.ChebyshevModel` values whose
    constants carry the weights); an immutable value."""

    first: ChebyshevModel
    second: ChebyshevModel
    parity: str = "none"
    chi2: float = float("nan")
    dof: int = 0
    theta: np.ndarray = None
    order: tuple = (2, 2)

    integrand = "two-component"

    @property
    def domain(self):
        return self.first.domain

    @property
    def components(self):
        return (self.first, self.second)

    @property
    def degree(self):
        return f"{self.order[0]}+{self.order[1]}"

    @property
    def label(self):
        return f"two-component:{self.degree}"

    def log_density(self, q):
        return np.logaddexp(self.first.log_density(q), self.second.log_density(q))

    def derivative(self, q):
        p1, p2 = self.first.log_density(q), self.second.log_density(q)
        share = 0.5 * (1 + np.tanh(0.5 * (p2 - p1)))        # exp(p2) / (exp(p1) + exp(p2))
        return (1 - share) * self.first.derivative(q) + share * self.second.derivative(q)

    def refit(self, density, sigma=None, correction=None):
        """The same recipe on other data (a resample of the replicas): the
        same degrees, started from this model's parameters."""
        form = TwoComponentForm(self.domain, self.order, self.parity)
        measured = Measured(density, sigma if sigma is not None else density.error,
                            correction)
        sol = solve(measured, form.evaluate, measured.start_constant(form.evaluate, self.theta))
        if sol is None:
            raise ValueError(f"{self.label}: a resample of the data could not be refitted")
        return form.model(sol.theta, sol.chi2, sol.dof)


class TwoComponentForm:
    """Core parameters: c_1[1..d_1] (the first constant is fixed: only the
    ratio of the weights is measured) and c_2[0..d_2]; with even parity
    c[1..d] only, the second component the mirror image of the first."""

    def __init__(self, domain, order, parity="none"):
        self.domain, self.order, self.parity = domain, tuple(order), parity
        d1, d2 = self.order
        self.n_core = d1 if parity == "even" else d1 + d2 + 1

    def _vander(self, q):
        a, b = self.domain
        x = (2.0 * np.asarray(q, dtype=float) - a - b) / (b - a)
        return remembered(self, q, lambda: (C.chebvander(x, self.order[0]),
                                            C.chebvander(x, self.order[1])))

    def coefficients(self, core):
        d1, d2 = self.order
        c1 = np.concatenate([[0.0], core[:d1]])
        if self.parity == "even":
            return c1, c1 * (-1.0) ** np.arange(d1 + 1)
        return c1, np.asarray(core[d1:d1 + d2 + 1], dtype=float)

    def evaluate(self, q, core, jacobian=True):
        V1, V2 = self._vander(q)
        c1, c2 = self.coefficients(core)
        p1, p2 = V1 @ c1, V2 @ c2
        value = np.logaddexp(p1, p2)
        if not jacobian:
            return value, None
        share = 0.5 * (1 + np.tanh(0.5 * (p2 - p1)))
        if self.parity == "even":
            sign = (-1.0) ** np.arange(self.order[0] + 1)
            jac = ((1 - share)[:, None] * V1 + share[:, None] * V1 * sign)[:, 1:]
        else:
            jac = np.hstack([(1 - share)[:, None] * V1[:, 1:], share[:, None] * V2])
        return value, jac

    def model(self, theta, chi2, dof):
        core = np.asarray(theta[:self.n_core], dtype=float)
        c1, c2 = self.coefficients(core)
        a, b = self.domain
        grid = np.linspace(a, b, 2001)
        V1, V2 = self._vander(grid)
        top = float(np.max(np.logaddexp(V1 @ c1, V2 @ c2)))
        c1, c2 = c1.copy(), c2.copy()
        c1[0] -= top
        c2[0] -= top
        return TwoComponentModel(first=ChebyshevModel(coef=c1, domain=self.domain),
                                 second=ChebyshevModel(coef=c2, domain=self.domain),
                                 parity=self.parity, chi2=chi2, dof=dof, theta=core,
                                 order=self.order)

    def start(self, valley, density):
        """Core parameters from the data's two peaks: per side of the valley
        a parabola through the points within 6 nats of that side's peak
        (or, with too few points or no downward curvature, a Gaussian of a
        third of the peak-valley distance)."""
        q, v, _ = profile(density)
        k = int(np.argmin(np.abs(q - valley["valley"])))
        a, b = self.domain
        grid = np.linspace(a, b, 64)
        x = (2 * grid - a - b) / (b - a)
        comps = []
        for side, peak in ((slice(0, k + 1), valley["peaks"][0]),
                           (slice(k, len(q)), valley["peaks"][1])):
            qs, vs = q[side], v[side]
            top = float(np.max(vs))
            near = vs > top - 6
            curv = None
            if near.sum() >= 4:
                c2, c1, c0 = np.polyfit(qs[near], vs[near], 2)
                if c2 < 0:
                    curv = (c2, c1, c0)
            if curv is None:
                s = max(abs(valley["valley"] - peak) / 3, 1e-3 * (b - a))
                curv = (-0.5 / s ** 2, peak / s ** 2, top - 0.5 * peak ** 2 / s ** 2)
            comps.append(np.polyval(curv, grid))
        d1, d2 = self.order
        c1 = C.chebfit(x, comps[0], d1)
        c2 = C.chebfit(x, comps[1], d2)
        if self.parity == "even":
            return c1[1:] * 1.0
        c2[0] -= c1[0]
        return np.concatenate([c1[1:], c2])

    def padded(self, core, order):
        """Core parameters of a lower order padded with zero coefficients."""
        d1, d2 = order
        if self.parity == "even":
            return np.concatenate([core[:d1], np.zeros(self.order[0] - d1)])
        return np.concatenate([core[:d1], np.zeros(self.order[0] - d1),
                               core[d1:d1 + d2 + 1], np.zeros(self.order[1] - d2)])


@dataclass(frozen=True)
class TwoComponentFit:
    """The chosen two-component model, its neighbours and how it was chosen
    (the fields the analysis reads of every fit)."""

    model: TwoComponentModel
    next_models: tuple
    candidates: dict
    criterion: str
    consistent: bool
    solution: object
    valley: dict = None
    parity_test: dict = None
    noise_estimated: bool = False
    notes: tuple = ()
    spurious: float = 0.0
    correction: np.ndarray = None
    sigma: np.ndarray = None
    sigma_dof: int = None
    chi2_scale: float = 1.0

    def sensitivity_models(self):
        """Models one tenth of a standard deviation either side along every
        principal axis of the parameter covariance, for linear propagation of
        the statistical errors without replicas
        (:func:`signfree.models.nonlinear.sensitivity_models`)."""
        form = TwoComponentForm(self.model.domain, self.model.order, self.model.parity)
        return sensitivity_models(self.solution,
                                  lambda t: form.model(t, self.model.chi2, self.model.dof))


def _candidates(density, measured, valley, parity, chi2_scale, max_degree):
    limit = max_parameters(measured.n)
    solved = {}

    def run(order):
        if order in solved:
            return solved[order]
        form = TwoComponentForm(density.domain, order, parity)
        starts = []
        if parity == "even":
            lower = [(order[0] - 1,) * 2] if order[0] > 2 else []
        else:
            lower = [(order[0] - 1, order[1])] if order[0] > 2 else []
            lower += [(order[0], order[1] - 1)] if order[1] > 2 else []
        for low in lower:
            res = run(low)
            if res is not None:
                starts.append(form.padded(res[1].theta[:res[1].n_params - measured.extra()], low))
        if not starts:
            starts.append(form.start(valley, density))
        best = None
        for core in starts:
            sol = solve(measured, form.evaluate, measured.start_constant(form.evaluate, core),
                        chi2_scale)
            if sol is not None and (best is None or sol.chi2 < best.chi2):
                best = sol
        solved[order] = None if best is None else (form.model(best.theta, best.chi2, best.dof),
                                                   best)
        return solved[order]

    cands = []
    for d1 in range(2, max_degree + 1):
        for d2 in ([d1] if parity == "even" else range(2, max_degree + 1)):
            n_par = TwoComponentForm(density.domain, (d1, d2), parity).n_core + measured.extra()
            if n_par <= limit:
                cands.append(Candidate(key=(d1, d2), n_params=n_par,
                                       fit=lambda o=(d1, d2): run(o)))
    return cands


def fit_two_component(density, base=None, parity=None, max_degree=MAX_DEGREE, valley=None):
    """Fit the two-component model (module docstring). ``base`` is a
    Chebyshev fit of the same density whose errors and chi^2 scale are
    used (made when not given); ``valley`` the result of
    :func:`find_valley` (found when not given). None when the data show no
    valley to start from."""
    from signfree.models.chebyshev import fit_chebyshev
    from signfree.models.shape import bin_correction
    valley = valley or find_valley(density)
    if valley is None:
        return None
    if base is None:
        base = fit_chebyshev(density, parity=parity)
    parity = parity or density.symmetry or base.model.parity
    parity = "even" if parity == "even" else "none"
    correction = None        # histograms: the bin correction of this model's own fit
    rounds = 3 if density.kind == "histogram" else 1
    for _ in range(rounds):
        measured = Measured(density, base.sigma, correction)
        cands = _candidates(density, measured, valley, parity, base.chi2_scale, max_degree)
        step = (lambda k: [(k[0] + 1, k[1] + 1), (k[0] + 2, k[1] + 2), (k[0] - 1, k[1] - 1),
                           (k[0] - 2, k[1] - 2)]) if parity == "even" \
            else (lambda k: [(k[0] + 1, k[1]), (k[0], k[1] + 1), (k[0] - 1, k[1]),
                             (k[0], k[1] - 1)])
        chosen, neighbours, consistent, criterion, (spurious, _) = choose_order(
            cands, density, step)
        if chosen is None:
            return None
        if density.kind == "histogram":
            correction = bin_correction(density, chosen.get()[0])
    model, sol = chosen.get()
    notes = []
    if not consistent:
        notes.append(f"no pair of component degrees fits the data within their errors "
                     f"(chi2/dof = {model.chi2 / max(model.dof, 1):.3g} at {model.label})")
    return TwoComponentFit(model=model, next_models=tuple(c.get()[0] for c in neighbours),
                           candidates={c.key: c.get()[0] for c in cands if c.tried and c.result},
                           criterion=criterion, consistent=consistent, solution=sol,
                           valley=valley, parity_test={}, noise_estimated=base.noise_estimated,
                           notes=tuple(notes), spurious=spurious, correction=correction,
                           sigma=base.sigma, sigma_dof=base.sigma_dof,
                           chi2_scale=base.chi2_scale)
