"""Chebyshev smoothing of ln rho: weighted least squares in the measured
quantity, with the degree chosen from the stated errors.

The model is ln rho(q) = sum_k c_k T_k(x), x = (2 q - q_min - q_max) / (q_max - q_min)
on the data domain, as in numpy.polynomial (a domain mapped to the window
[-1, 1]). Slopes are fitted as slopes: a Robbins-Monro (LLR) or Wang-Landau
slope estimates the mean of d ln rho/dq over its interval, which for the model
is (p(q_hi) - p(q_lo)) / width exactly, so every row of the design matrix is a
difference of two Chebyshev values and the independent slope errors stay
independent. Log densities and histograms are fitted as ln rho directly, with a
free constant c_0 (ln rho is known only up to a constant).

Degree criterion (documented in the README): among the candidate degrees
(every degree from 2, or every even/odd degree when a parity is imposed), take
the smallest whose chi^2 is consistent with the errors at the 5% level,
P(chi^2_dof >= chi^2) >= 0.05. If none is, take the minimum of the Akaike
information criterion chi^2 + 2 m and flag the fit as inconsistent. Without
stated errors the noise variance is estimated from the residuals of the
largest candidate degree (the usual unbiased estimate RSS / dof).

Parity (symmetric data): stated by metadata or option; otherwise, when the
domain is symmetric about q = 0, the even model (odd in the slope) is
compared with the unrestricted one at the unrestricted choice of degree by
the chi^2-difference test, Delta chi^2 ~ chi^2 with Delta m degrees of
freedom, and imposed when p >= 0.05.
"""
from dataclasses import dataclass, field

import numpy as np
from numpy.polynomial import chebyshev as C
import mpmath

from signfree.density import pooled_errors
from signfree.errors import InputError
from signfree.models.shape import bin_correction, spurious_weight

MAX_DEGREE = 80
P_ACCEPT = 0.05
SPIKE_LIMIT = 1e-3      # largest fraction of the weight a candidate may put where the data do not


@dataclass(frozen=True)
class ChebyshevModel:
    """ln rho as a Chebyshev series on ``domain``; an immutable value.

    ``coef[k]`` multiplies T_k(x); the coefficients are exact binary numbers
    and the model is defined by them (the engine evaluates it exactly in ball
    arithmetic). ``chi2`` and ``dof`` describe the fit that made it.
    """

    coef: np.ndarray
    domain: tuple
    parity: str = "none"
    chi2: float = float("nan")
    dof: int = 0

    integrand = "chebyshev-exponent"

    @property
    def degree(self):
        return len(self.coef) - 1

    @property
    def label(self):
        return f"chebyshev:{self.degree}"

    def window(self, q):
        a, b = self.domain
        return (2.0 * np.asarray(q, dtype=float) - a - b) / (b - a)

    def log_density(self, q):
        return C.chebval(self.window(q), self.coef)

    def derivative(self, q):
        a, b = self.domain
        return C.chebval(self.window(q), C.chebder(self.coef)) * 2.0 / (b - a)


@dataclass(frozen=True)
class ChebyshevFit:
    """The chosen model, the next two candidate degrees (whose largest change
    of the value is the truncation error), every candidate tried, and how the
    choice was made."""

    model: ChebyshevModel
    next_models: tuple
    candidates: dict
    criterion: str
    consistent: bool
    parity_test: dict = field(default_factory=dict)
    noise_estimated: bool = False
    notes: tuple = ()
    spurious: float = 0.0
    correction: np.ndarray = None
    sigma: np.ndarray = None
    sigma_dof: int = None
    chi2_scale: float = 1.0


def _basis(kind, degree, parity):
    """Indices k of the fitted coefficients."""
    if parity == "even":
        ks = list(range(2, degree + 1, 2))
    elif parity == "odd":
        ks = list(range(1, degree + 1, 2))
    else:
        ks = list(range(1, degree + 1))
    if kind != "slopes":
        ks = [0] + ks
    return ks


def _fit_data(density, correction=None):
    """(rows of the design generator, y, sigma or None) in the measured
    quantity; ``correction`` (histograms: per bin, from
    :func:`signfree.models.shape.bin_correction`) turns bin averages into
    values of ln rho at the bin centres."""
    if density.kind == "slopes":
        return density.q, density.value, density.error
    q, y, err = density.log_density_points()
    if correction is not None and density.kind == "histogram":
        y = y - np.asarray(correction)[density.value > 0]
    return q, y, err


def _design(density, domain, ks):
    a, b = domain
    deg = max(ks)
    if density.kind == "slopes":
        x_lo = (2 * (density.q - density.width / 2) - a - b) / (b - a)
        x_hi = (2 * (density.q + density.width / 2) - a - b) / (b - a)
        full = (C.chebvander(x_hi, deg) - C.chebvander(x_lo, deg)) / density.width[:, None]
    else:
        q, _, _ = density.log_density_points()
        full = C.chebvander((2 * q - a - b) / (b - a), deg)
    return full[:, ks]


def _solve(design, y, sigma):
    """Weighted least squares; returns (parameters, chi^2 with the given sigma)."""
    w = 1.0 / sigma
    A = design * w[:, None]
    scale = np.sqrt((A * A).sum(axis=0))
    scale[scale == 0] = 1.0
    sol, *_ = np.linalg.lstsq(A / scale, y * w, rcond=None)
    sol = sol / scale
    resid = (design @ sol - y) * w
    return sol, float(resid @ resid)


class NestedFits:
    """Weighted least-squares fits of every degree up to ``max_degree`` from
    one QR factorisation: the Chebyshev columns are nested, so the fit with
    the first m columns is R[:m, :m]^-1 (Q^T b)[:m] and its chi^2 is
    |b - Q Q^T b|^2 + |(Q^T b)[m:]|^2 (Golub & Van Loan, Matrix Computations,
    5.3)."""

    def __init__(self, density, parity, sigma, max_degree, chi2_scale=1.0, correction=None):
        self.density, self.parity = density, parity
        self.ks = _basis(density.kind, max_degree, parity)
        _, y, _ = _fit_data(density, correction)
        self.design = _design(density, density.domain, self.ks)
        A = self.design / sigma[:, None]
        b = y / sigma
        self.scale = np.sqrt((A * A).sum(axis=0))
        self.scale[self.scale == 0] = 1.0
        self.Q, self.R = np.linalg.qr(A / self.scale)
        self.qb = self.Q.T @ b
        perp = b - self.Q @ self.qb
        self.chi2_perp = float(perp @ perp)
        self.chi2_scale = chi2_scale
        self.n = len(y)
        self.cache = {}

    def model(self, degree):
        if degree not in self.cache:
            m = len(_basis(self.density.kind, degree, self.parity))
            sol = np.linalg.solve(self.R[:m, :m], self.qb[:m]) / self.scale[:m]
            tail = self.qb[m:]
            chi2 = (self.chi2_perp + float(tail @ tail)) * self.chi2_scale
            self.cache[degree] = _model_from(self.density, degree, self.parity, self.ks[:m],
                                             sol, self.design[:, :m], chi2, self.n - m)
        return self.cache[degree]


def _model_from(density, degree, parity, ks, sol, design, chi2, dof):
    coef = np.zeros(degree + 1)
    coef[ks] = sol
    if density.kind != "slopes":
        # fix the free constant so that max ln rho on the data is about 0
        coef[0] -= np.max(design @ sol)
    return ChebyshevModel(coef=coef, domain=density.domain, parity=parity, chi2=chi2, dof=dof)


def fit_degree(density, degree, parity="none", y=None, sigma=None, domain=None,
               correction=None):
    """Least-squares Chebyshev model of the given degree (``y`` overrides the
    density's central values, for refitting replicas; ``correction`` as in
    :func:`_fit_data`)."""
    domain = domain or density.domain
    ks = _basis(density.kind, degree, parity)
    _, y0, s0 = _fit_data(density, correction)
    y = y0 if y is None else y
    sigma = (s0 if s0 is not None else np.ones_like(y)) if sigma is None else sigma
    design = _design(density, domain, ks)
    sol, chi2 = _solve(design, y, sigma)
    model = _model_from(density, degree, parity, ks, sol, design, chi2, len(y) - len(ks))
    if domain != density.domain:
        model = ChebyshevModel(coef=model.coef, domain=domain, parity=parity, chi2=chi2,
                               dof=model.dof)
    return model


def candidate_degrees(kind, n_points, parity, max_degree=MAX_DEGREE):
    """Degrees tried: from 2 (1 for odd parity), every one or every other
    with parity, at most MAX_DEGREE and with at most 60% as many fitted
    coefficients as data points (a fit that nearly interpolates its data
    says nothing about ln rho between them)."""
    start = {"even": 2, "odd": 1}.get(parity, 2)
    step = 1 if parity == "none" else 2
    out = []
    for d in range(start, max_degree + 1, step):
        m = len(_basis(kind, d, parity))
        if n_points - m >= 1 and m <= max(3, int(0.6 * n_points)):
            out.append(d)
    return out


def chi2_sf(chi2, dof):
    """P(X >= chi2) for X ~ chi^2 with dof degrees of freedom: the regularised
    upper incomplete gamma function Q(dof/2, chi2/2) (DLMF 8.2.4), from
    mpmath (scipy.stats costs a second of start-up time)."""
    if dof <= 0:
        return 0.0
    return float(mpmath.gammainc(dof / 2.0, chi2 / 2.0, mpmath.inf, regularized=True))


_p_value = chi2_sf


def _n_fit(density, correction=None):
    return len(_fit_data(density, correction)[1])


def _select(density, parity, sigma, degree=None, max_degree=MAX_DEGREE, chi2_scale=1.0,
            correction=None):
    """Fit every candidate degree from one QR factorisation and choose one:
    the smallest whose chi^2 is consistent with the errors and whose shape
    puts no more than SPIKE_LIMIT of its weight where the anchors do not
    allow it (:func:`signfree.models.shape.spurious_weight`); else the
    minimum of AIC among the shapely candidates, flagged as inconsistent.
    Returns (chosen, next models, all fits, consistent, criterion)."""
    n = _n_fit(density, correction)
    degrees = candidate_degrees(density.kind, n, parity, max_degree)
    if not degrees:
        need = len(_basis(density.kind, {"odd": 1}.get(parity, 2), parity)) + 1
        raise InputError(density.source, f"{n} usable data points, but the smallest "
                         f"Chebyshev model needs at least {need}")
    if degree is not None:
        if degree < 1 or (parity == "even" and degree % 2) or (parity == "odd" and not degree % 2):
            raise InputError(density.source, f"--degree {degree} does not match the {parity} "
                             f"parity of the data (candidates {degrees[0]}, {degrees[0] + 2}, ...)")
        if degree not in degrees:
            raise InputError(density.source, f"{n} usable data points, but degree "
                             f"{degree} needs at least {len(_basis(density.kind, degree, parity)) + 1}")
    nested = NestedFits(density, parity, sigma, degrees[-1], chi2_scale, correction)
    spikes = {}

    def shapely(d):
        if d not in spikes:
            spikes[d] = spurious_weight(density, nested.model(d))[0] <= SPIKE_LIMIT
        return spikes[d]

    def passes(d):
        m = nested.model(d)
        return _p_value(m.chi2, m.dof) >= P_ACCEPT

    if degree is not None:
        chosen = degree
        criterion = "degree given by the user"
        consistent = passes(degree) and shapely(degree)
    else:
        chosen = next((d for d in degrees if passes(d) and shapely(d)), None)
        consistent = chosen is not None
        criterion = "smallest degree with P(chi2) >= 0.05 and no spurious weight"
        if chosen is None:
            tame = [d for d in degrees if shapely(d)] or degrees[:1]
            chosen = min(tame, key=lambda d: nested.model(d).chi2 + 2 * (n - nested.model(d).dof))
            criterion = "no degree consistent with the errors; minimum of AIC"
    i = degrees.index(chosen)
    above = degrees[i + 1: i + 3]
    nxt = above or degrees[max(0, i - 2): i][::-1]
    return (nested.model(chosen), [nested.model(d) for d in nxt], nested.cache, consistent,
            criterion)


def domain_is_symmetric(domain):
    a, b = domain
    return abs(a + b) <= 1e-6 * (b - a)


def fit_chebyshev(density, degree=None, parity=None, max_degree=MAX_DEGREE):
    """Fit ln rho by a Chebyshev series, degree chosen by the criterion in the
    module docstring unless ``degree`` is given. ``parity`` None means: the
    density's stated symmetry, else detection. Histograms are fitted as bin
    integrals of the model (:func:`signfree.models.shape.bin_correction`,
    two rounds of refitting)."""
    notes = []
    _, y, sigma = _fit_data(density)
    noise_estimated = sigma is None
    if noise_estimated:
        general = candidate_degrees(density.kind, len(y), "none", max_degree)
        if not general:
            raise InputError(density.source, f"{len(y)} usable data points are too few "
                             "for a Chebyshev model")
        dmax = general[-1] if degree is None else degree
        probe = fit_degree(density, dmax, "none", sigma=np.ones_like(y))
        var = probe.chi2 / max(probe.dof, 1)
        sigma = np.full_like(y, np.sqrt(var) if var > 0 else 1.0)
        notes.append("no errors given: noise estimated from the residuals of degree "
                     f"{dmax} (sigma = {np.sqrt(var):.3g}); chi2 cannot judge the fit")
    # Errors from the scatter of R replicas are themselves uncertain: they
    # are pooled over neighbouring points (signfree.density.pooled_errors),
    # and the normalised residuals then follow Student's t with the pooled
    # degrees of freedom nu, whose mean square is nu / (nu - 2), so chi^2 is
    # rescaled by (nu - 2) / nu before it is judged.
    chi2_scale, nu = 1.0, None
    n_rep = len(density.replica_labels)
    if density.error_source == "replicas" and density.kind != "histogram":
        sigma, nu = pooled_errors(sigma, n_rep)
        chi2_scale = max(nu - 2, 1) / nu
        if nu < 10:
            notes.append(f"errors from the scatter of only {n_rep} replicas are rough "
                         f"({nu} degrees of freedom after pooling); the degree choice and "
                         "chi2 rest on them")
    parity = parity or density.symmetry
    if parity in ("even", "odd") and not domain_is_symmetric(density.domain):
        a, b = density.domain
        raise InputError(density.source, f"symmetry '{parity}' needs a q range symmetric "
                         f"about 0, but the data cover [{a:g}, {b:g}]")
    correction = None
    rounds = 3 if density.kind == "histogram" else 1
    for _ in range(rounds):
        chosen_parity, parity_test = _parity(density, parity, sigma, max_degree, chi2_scale,
                                             correction)
        model, nxt, fits, consistent, criterion = _select(
            density, chosen_parity, sigma, degree, max_degree, chi2_scale, correction)
        if density.kind == "histogram":
            correction = bin_correction(density, model)
    spurious, excess = spurious_weight(density, model)
    if nxt and nxt[0].degree < model.degree:
        notes.append(f"degree {model.degree} is the largest candidate: the truncation error "
                     f"is estimated against lower degrees")
    if not consistent:
        best = model.chi2 / max(model.dof, 1)
        if spurious > SPIKE_LIMIT:
            notes.append(f"the fit puts {spurious:.2g} of its weight between the data points "
                         f"where they do not allow it (up to {excess:.3g} above them)")
        notes.append(f"no degree fits the data within their errors (chi2/dof = {best:.3g} at "
                     f"degree {model.degree}): errors may be underestimated, or ln rho is not "
                     "smooth enough for a polynomial")
    return ChebyshevFit(model=model, next_models=tuple(nxt), candidates=fits, criterion=criterion,
                        consistent=consistent, parity_test=parity_test,
                        noise_estimated=noise_estimated, notes=tuple(notes),
                        spurious=spurious,
                        correction=correction, sigma=sigma, sigma_dof=nu,
                        chi2_scale=chi2_scale)


def _parity(density, parity, sigma, max_degree, chi2_scale, correction):
    """(parity, test record): the stated parity, or on a domain symmetric
    about 0 the even model when the chi^2-difference test against the
    unrestricted model at its chosen degree gives p >= 0.05."""
    if parity is not None:
        return parity, {}
    if not domain_is_symmetric(density.domain):
        return "none", {}
    general = _select(density, "none", sigma, None, max_degree, chi2_scale, correction)[0]
    d = general.degree + (general.degree % 2)
    if d not in candidate_degrees(density.kind, _n_fit(density, correction), "even", max_degree):
        return "none", {}
    even = fit_degree(density, d, "even", sigma=sigma, correction=correction)
    full = fit_degree(density, d, "none", sigma=sigma, correction=correction)
    dm = len(_basis(density.kind, d, "none")) - len(_basis(density.kind, d, "even"))
    dchi2 = max(even.chi2 - full.chi2, 0.0) * chi2_scale
    p = chi2_sf(dchi2, dm)
    result = "even" if p >= P_ACCEPT else "none"
    return result, {"test": "chi2 difference, even vs unrestricted", "degree": d,
                    "delta_chi2": dchi2, "delta_m": dm, "p": p, "result": result}
