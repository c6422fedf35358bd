"""A rational model of the slope: d ln rho/dq as a polynomial plus simple
poles in complex-conjugate pairs, so that by partial fractions

    ln rho(q) = P(x) + sum_j [a_j log(q - z_j) + conj(a_j) log(q - conj z_j)]

with P a Chebyshev series on the data domain (x the window coordinate, as
in numpy.polynomial), poles z_j = x_j + i y_j (y_j > 0) and complex residues
a_j = alpha_j + i beta_j. On the real axis each pair is
2 alpha_j ln|q - z_j| - 2 beta_j atan((q - x_j)/y_j) (the constant pi beta_j
dropped). The analytic continuation off the axis takes the branch cuts of
the logarithms as vertical rays from z_j upwards and from conj z_j
downwards, so that every Bernstein ellipse of a stretch of the axis that
leaves the poles out is free of cuts too.

Why: at a first-order transition the density has two peaks and ln rho
behaves like ln cosh, whose slope has poles close to the real axis
(a tanh); a polynomial in ln rho then converges only slowly (Trefethen,
ATAP ch. 8), a rational function of the slope does not.

Fit: AAA (Nakatsukasa, Sete & Trefethen, SIAM J. Sci. Comput. 40 (2018)
A1494; scipy.interpolate.AAA) on the measured slopes (or differences of
ln rho) proposes pole positions; with the poles fixed the model is linear
in the polynomial coefficients and the residues, which weighted linear
least squares gives, so the poles are refined by variable projection with
the stated errors (:meth:`RationalForm.projected_fit`;
:mod:`signfree.models.nonlinear` for the data and the order choice). The
order (pole pairs m, polynomial degree d) is the one with the fewest
parameters whose chi^2 passes, P(chi^2) >= 0.05, as for the Chebyshev fit;
the neighbouring orders (m, d + 1) and (m + 1, d) give the model error.
With even parity the poles lie on the imaginary axis and P is even.
"""
import math
import warnings
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import chebyshev as C

from signfree.models.nonlinear import Candidate, Measured, Solution, choose_order, \
    covariance_factor, max_parameters, remembered, sensitivity_models, solve

MAX_PAIRS = 6
MAX_DEGREE = 8
AAA_TERMS = (4, 6, 8, 12, 16, 24)


@dataclass(frozen=True)
class RationalModel:
    """ln rho = P(x) + sum over pole pairs (module docstring); an immutable
    value defined exactly by its double-precision parameters (the engine
    evaluates it in ball arithmetic). ``poles`` lie in the upper half
    plane."""

    coef: np.ndarray
    poles: tuple
    residues: tuple
    domain: tuple
    parity: str = "none"
    chi2: float = float("nan")
    dof: int = 0
    theta: np.ndarray = None      # the fitted parameters, for refits
    order: tuple = (0, 0)         # (pole pairs fitted, polynomial degree)

    integrand = "rational-log"

    @property
    def degree(self):
        return f"{self.order[0]}/{self.order[1]}"

    @property
    def label(self):
        return f"rational:{self.degree}"

    def window(self, q):
        a, b = self.domain
        return (2.0 * np.asarray(q) - a - b) / (b - a)

    def log_density(self, q):
        q = np.asarray(q, dtype=float)
        out = C.chebval(self.window(q), self.coef)
        for z, r in zip(self.poles, self.residues):
            u = q - z.real
            out = out + r.real * np.log(u * u + z.imag ** 2) \
                - 2 * r.imag * np.arctan(u / z.imag)
        return out

    def derivative(self, q):
        q = np.asarray(q, dtype=float)
        a, b = self.domain
        out = C.chebval(self.window(q), C.chebder(self.coef)) * 2.0 / (b - a)
        for z, r in zip(self.poles, self.residues):
            out = out + 2 * np.real(r / (q - z))
        return out

    def refit(self, density, sigma=None, correction=None):
        """The same recipe on other data (a resample of the replicas): the
        same order, started from this model's parameters."""
        form = RationalForm(self.domain, self.order[1], self.order[0], self.parity)
        measured = Measured(density, sigma if sigma is not None else density.error,
                            correction)
        sol = form.projected_fit(measured, list(self.poles))
        if sol is None:
            sol = solve(measured, form.evaluate, measured.start_constant(form.evaluate,
                                                                         self.theta))
        if sol is None:
            raise ValueError(f"{self.label}: a resample of the data could not be refitted")
        return form.model(sol.theta, measured, sol.chi2, sol.dof)


class RationalForm:
    """The parametrisation of one order: core parameters are the Chebyshev
    coefficients c_k (k >= 1, even k only with even parity), then per pole
    pair (alpha, beta, x, ln y); with even parity the poles sit on the
    imaginary axis, z = i y, and a pair has (alpha, ln y) only (its mirror
    image is itself, and the beta terms cancel)."""

    def __init__(self, domain, degree, pairs, parity="none"):
        self.domain, self.degree, self.pairs, self.parity = domain, degree, pairs, parity
        step = 2 if parity == "even" else 1
        self.ks = list(range(step, degree + 1, step))
        self.per_pair = 2 if parity == "even" else 4
        self.n_core = len(self.ks) + self.per_pair * pairs

    def window(self, q):
        a, b = self.domain
        return (2.0 * q - a - b) / (b - a)

    def unpack(self, core):
        """Per pair (alpha, beta, x, y)."""
        nk, k = len(self.ks), self.per_pair
        out = []
        for j in range(self.pairs):
            p = core[nk + k * j: nk + k * j + k]
            if k == 2:
                out.append((p[0], 0.0, 0.0, math.exp(min(max(p[1], -30.0), 30.0))))
            else:
                out.append((p[0], p[1], p[2], math.exp(min(max(p[3], -30.0), 30.0))))
        return out

    def _vander(self, q):
        return remembered(self, q, lambda: C.chebvander(self.window(q), self.degree)[:, self.ks])

    def evaluate(self, q, core, jacobian=True):
        q = np.asarray(q, dtype=float)
        V = self._vander(q) if len(self.ks) else np.zeros((len(q), 0))
        nk = len(self.ks)
        value = V @ core[:nk]
        cols = [V]
        for al, be, x, y in self.unpack(core):
            u = q - x
            r2 = u * u + y * y
            lg, at = np.log(r2), np.arctan(u / y)
            if self.per_pair == 2:
                value = value + 2 * al * lg
                if jacobian:
                    cols.append(np.stack([2 * lg, 4 * al * y * y / r2], axis=1))
                continue
            value = value + al * lg - 2 * be * at
            if jacobian:
                cols.append(np.stack([lg, -2 * at, (-2 * al * u + 2 * be * y) / r2,
                                      y * (2 * al * y + 2 * be * u) / r2], axis=1))
        return value, (np.hstack(cols) if jacobian else None)

    def model(self, theta, measured, chi2, dof):
        nk = len(self.ks)
        core = np.asarray(theta[:self.n_core], dtype=float)
        coef = np.zeros(self.degree + 1)
        coef[self.ks] = core[:nk]
        poles, residues = [], []
        for al, be, x, y in self.unpack(core):
            poles.append(complex(x, y))
            residues.append(complex(2 * al, 0.0) if self.per_pair == 2 else complex(al, be))
        model = RationalModel(coef=coef, poles=tuple(poles), residues=tuple(residues),
                              domain=self.domain, parity=self.parity, chi2=chi2, dof=dof,
                              theta=core, order=(self.pairs, self.degree))
        # the free constant: the largest ln rho on the domain about 0
        a, b = self.domain
        top = float(np.max(model.log_density(np.linspace(a, b, 2001))))
        coef = coef.copy()
        coef[0] -= top
        return RationalModel(coef=coef, poles=model.poles, residues=model.residues,
                             domain=self.domain, parity=self.parity, chi2=chi2, dof=dof,
                             theta=core, order=model.order)

    def linear_columns(self, q, positions):
        """ln rho's columns for the parameters it is linear in, at fixed
        poles: the Chebyshev terms, then per pair alpha (and beta)."""
        cols = [self._vander(q)]
        for z in positions:
            u, y = q - z.real, z.imag
            lg = np.log(u * u + y * y)
            if self.per_pair == 2:
                cols.append(2 * lg[:, None])
            else:
                cols.append(np.stack([lg, -2 * np.arctan(u / y)], axis=1))
        return np.hstack(cols)

    def _linear_solve(self, measured, positions):
        """(linear parameters, weighted residuals) at fixed poles."""
        A = measured.design(lambda q: self.linear_columns(q, positions)) / measured.sigma[:, None]
        rhs = measured.y / measured.sigma
        scale = np.sqrt((A * A).sum(axis=0))
        scale[scale == 0] = 1.0
        sol, *_ = np.linalg.lstsq(A / scale, rhs, rcond=None)
        return sol / scale, A @ (sol / scale) - rhs

    def linear_start(self, measured, positions):
        """Core parameters (and the constant, for ln rho data) for given pole
        positions: the polynomial coefficients and residues by weighted
        linear least squares (the model is linear in them once the poles
        are fixed)."""
        sol, _ = self._linear_solve(measured, positions)
        nk, k = len(self.ks), self.per_pair
        theta = np.zeros(self.n_core + measured.extra())
        theta[:nk] = sol[:nk]
        for j, z in enumerate(positions):
            base = nk + k * j
            if k == 2:
                theta[base], theta[base + 1] = sol[nk + j], math.log(z.imag)
            else:
                theta[base:base + 4] = [sol[nk + 2 * j], sol[nk + 2 * j + 1], z.real,
                                        math.log(z.imag)]
        if measured.free_constant:
            theta[-1] = sol[-1]
        return theta

    def projected_fit(self, measured, positions, chi2_scale=1.0):
        """Weighted least squares by variable projection (Golub & Pereyra,
        SIAM J. Numer. Anal. 10 (1973) 413): only the pole positions are
        iterated (Levenberg-Marquardt on them, scipy.optimize.least_squares
        with difference derivatives); for each, the polynomial coefficients
        and residues follow by linear least squares. Far poles make their
        logarithms nearly polynomial, a near-degeneracy the linear solve
        takes in its stride where a joint iteration crawls. Returns a
        :class:`~signfree.models.nonlinear.Solution` or None."""
        from scipy.optimize import least_squares
        even = self.per_pair == 2
        start = []
        for z in positions:
            start += [math.log(z.imag)] if even else [z.real, math.log(z.imag)]

        def places(v):
            v = np.clip(v, -30.0, 30.0) if even else v
            if even:
                return [complex(0.0, math.exp(t)) for t in np.clip(v, -30, 30)]
            return [complex(v[2 * j], math.exp(min(max(v[2 * j + 1], -30.0), 30.0)))
                    for j in range(self.pairs)]

        def resid(v):
            r = self._linear_solve(measured, places(v))[1]
            return r if np.all(np.isfinite(r)) else np.full_like(r, 1e150)

        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            try:
                out = least_squares(resid, np.array(start), method="trf", x_scale=1.0,
                                    xtol=1e-10, ftol=1e-10, max_nfev=60 * (len(start) + 1))
            except (ValueError, OverflowError, np.linalg.LinAlgError):
                return None
        theta = self.linear_start(measured, places(out.x))
        if measured.empty is not None:
            # empty bins enter chi^2 nonlinearly: a joint polish takes them in
            polished = solve(measured, self.evaluate, theta, chi2_scale)
            if polished is not None:
                return polished
        r = measured.residuals(self.evaluate, theta)
        if not np.all(np.isfinite(r)):
            return None
        J = measured.weighted_jacobian(self.evaluate, theta)
        return Solution(theta=theta, chi2=float(r @ r) * chi2_scale, dof=measured.n - len(theta),
                        factor=covariance_factor(J), converged=out.status > 0)


def slope_points(density, sigma):
    """(q, slope) points for AAA: the measured slopes, or differences of
    ln rho between neighbouring points; only points whose error is within
    three times the median (AAA interpolates, and noisy tails would draw
    poles to themselves)."""
    if density.kind == "slopes":
        q, y, err = density.q, density.value, np.asarray(sigma, dtype=float)
    else:
        q0, v, _ = density.log_density_points()
        s = np.asarray(sigma, dtype=float)
        dq = np.diff(q0)
        q, y = 0.5 * (q0[1:] + q0[:-1]), np.diff(v) / dq
        err = np.hypot(s[1:], s[:-1]) / dq
    keep = err <= 3 * np.median(err)
    return q[keep], y[keep]


def aaa_pole_sets(density, sigma, parity="none"):
    """Candidate pole positions from AAA runs of several sizes: per run the
    poles in the upper half plane nearest the data range (complex poles of
    a real function come in conjugate pairs), nearest first. Poles on or
    within a small fraction of the grid spacing of the axis are the
    interpolation of noise (Froissart doublets) and are left out."""
    from scipy.interpolate import AAA
    q, y = slope_points(density, sigma)
    a, b = density.domain
    L = b - a
    spacing = float(np.median(np.diff(q))) if len(q) > 1 else L
    sets = []
    for terms in AAA_TERMS:
        if terms >= len(q) - 2:
            break
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                r = AAA(q, y, rtol=1e-13, max_terms=terms)
                p, res = r.poles(), r.residues()
            except (ValueError, np.linalg.LinAlgError, ZeroDivisionError):
                continue
        ok = (p.imag > spacing / 16) & (np.abs(p.real - 0.5 * (a + b)) < L) & (p.imag < L) \
            & (np.abs(res) > 1e-3) & np.isfinite(p)
        p = p[ok]
        if parity == "even":
            # an even density's poles on the imaginary axis (others would
            # need their mirror images; left to the polynomial and more pairs)
            p = np.array([complex(0.0, abs(z)) for z in p if abs(z.real) < 0.5 * z.imag])
        inside = (p.real >= a) & (p.real <= b)
        dist = np.where(inside, p.imag, np.abs(p - np.clip(p.real, a, b)))
        sets.append([complex(z) for z in p[np.argsort(dist)]])
    # poles far from the data (a slope close to a polynomial has none
    # nearer): a start whose residues the linear solve may leave near zero
    far = [complex(0.5 * (a + b) + (0.0 if parity == "even" else 0.3 * k * L), (1 + k) * L)
           for k in range(MAX_PAIRS)]
    return [s + far for s in sets] + [far]


def _distinct_starts(starts, tol):
    """Pole sets that differ: two sets whose poles, sorted, lie within tol
    of each other start the same fit."""
    out = []
    for s in starts:
        key = sorted(s, key=lambda z: (z.imag, z.real))
        if not any(len(key) == len(o) and all(abs(u - v) <= tol for u, v in zip(key, o))
                   for o in out):
            out.append(key)
    return out


@dataclass(frozen=True)
class RationalFit:
    """The chosen rational model, its neighbouring orders, how it was chosen
    and what the analysis needs of a fit (the same fields as a Chebyshev
    fit)."""

    model: RationalModel
    next_models: tuple
    candidates: dict
    criterion: str
    consistent: bool
    solution: object
    measured: object
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
        form = RationalForm(self.model.domain, self.model.order[1], self.model.order[0],
                            self.model.parity)
        return sensitivity_models(self.solution,
                                  lambda t: form.model(t, self.measured, self.model.chi2, self.model.dof))


def _fit_orders(density, measured, parity, chi2_scale, pole_sets, max_pairs, max_degree):
    """Candidates of every order (m pairs, degree d) with lazy, warm-started
    fits."""
    a, b = density.domain
    limit = max_parameters(measured.n)
    step = 2 if parity == "even" else 1
    degrees = list(range(2, max_degree + 1, step))
    solved = {}

    def run(m, d):
        if (m, d) in solved:
            return solved[(m, d)]
        form = RationalForm(density.domain, d, m, parity)
        starts = []
        if d == degrees[0]:
            for poles in pole_sets:
                if len(poles) >= m:
                    starts.append(poles[:m])
            lower = run(m - 1, d) if m > 1 else None
            if lower is not None:
                prev = list(lower[0].poles)
                for poles in pole_sets:
                    extra = [z for z in poles if all(abs(z - w) > 0.05 * (b - a) for w in prev)]
                    if extra:
                        starts.append(prev + extra[:1])
                        break
            starts = _distinct_starts(starts, 0.02 * (b - a))
        else:
            below = run(m, d - step)
            if below is None:
                solved[(m, d)] = None
                return None
            starts = [list(below[0].poles)]
        best = None
        for positions in starts:
            sol = form.projected_fit(measured, positions, chi2_scale)
            if sol is not None and (best is None or sol.chi2 < best.chi2):
                best = sol
        if best is None:
            solved[(m, d)] = None
            return None
        model = form.model(best.theta, measured, best.chi2, best.dof)
        if not _tame(model, density):
            solved[(m, d)] = None
            return None
        solved[(m, d)] = (model, best)
        return solved[(m, d)]

    cands = []
    for m in range(1, max_pairs + 1):
        for d in degrees:
            n_par = RationalForm(density.domain, d, m, parity).n_core + measured.extra()
            if n_par <= limit:
                cands.append(Candidate(key=(m, d), n_params=n_par,
                                       fit=(lambda m=m, d=d: run(m, d))))
    return cands, degrees


def _tame(model, density):
    """Poles that stay off the data: a pole closer to the axis than 1/1000
    of the range inside it makes a spike no data support."""
    a, b = density.domain
    for z in model.poles:
        if a <= z.real <= b and z.imag < 1e-3 * (b - a):
            return False
    return bool(np.all(np.isfinite(model.log_density(np.linspace(a, b, 257)))))


def fit_rational(density, base=None, parity=None, max_pairs=MAX_PAIRS, max_degree=MAX_DEGREE):
    """Fit the rational model of the slope (module docstring). ``base`` is a
    Chebyshev fit of the same density (:func:`signfree.models.chebyshev.
    fit_chebyshev`), whose errors (pooled replica errors, or the estimate
    from residuals) and chi^2 scale are used; made when not given."""
    from signfree.models.chebyshev import fit_chebyshev
    from signfree.models.shape import bin_correction
    if base is None:
        base = fit_chebyshev(density, parity=parity)
    parity = parity or density.symmetry or base.model.parity
    parity = "even" if parity == "even" else "none"
    step = 2 if parity == "even" else 1
    sigma = base.sigma
    pole_sets = aaa_pole_sets(density, sigma, parity)
    correction = None        # histograms: the bin correction of this model's own fit
    rounds = 3 if density.kind == "histogram" else 1
    for _ in range(rounds):
        measured = Measured(density, sigma, correction)
        cands, _ = _fit_orders(density, measured, parity, base.chi2_scale, pole_sets,
                               max_pairs, max_degree)
        chosen, neighbours, consistent, criterion, (spurious, excess) = choose_order(
            cands, density, lambda k: [(k[0], k[1] + step), (k[0] + 1, k[1]),
                                       (k[0], k[1] - step), (k[0] - 1, k[1])])
        if chosen is None:
            return None
        if density.kind == "histogram":
            correction = bin_correction(density, chosen.get()[0])
    model, sol = chosen.get()
    notes = []
    if not consistent:
        notes.append(f"no rational order fits the data within their errors (chi2/dof = "
                     f"{model.chi2 / max(model.dof, 1):.3g} at {model.label})")
    if not neighbours:
        notes.append(f"{model.label}: no neighbouring order could be fitted; the model error "
                     "rests on the structure bound alone")
    elif neighbours[0].key[0] < model.order[0] or neighbours[0].key[1] < model.order[1]:
        notes.append(f"{model.label} is the largest order the data allow: the model error is "
                     "estimated against smaller orders")
    return RationalFit(model=model, next_models=tuple(c.get()[0] for c in neighbours),
                       candidates={c.key: c.get()[0] for c in cands if c.tried and c.result},
                       criterion=criterion, consistent=consistent, solution=sol,
                       measured=measured, parity_test={}, noise_estimated=base.noise_estimated,
                       notes=tuple(notes), spurious=spurious, correction=correction,
                       sigma=sigma, sigma_dof=base.sigma_dof, chi2_scale=base.chi2_scale)
