"""Statistical errors carried through the whole chain (fit, then Fourier
integral).

With replicas (independent repetitions of the whole measurement) every
resample of the replicas is refitted with the same degree and parity and
integrated in the same batch as the central model:
  jackknife  delete-one over replicas, sigma^2 = (R-1)/R sum |z_i - zbar|^2
             (Efron & Stein 1981; Efron, The Jackknife, the Bootstrap and
             Other Resampling Plans, 1982)
  bootstrap  B resamples of the R replicas with replacement,
             sigma^2 = sum |z_b - zbar|^2 / (B - 1) (Efron 1979); the seed is
             recorded.
Without replicas but with per-point errors, the fit-coefficient covariance
C = (A^T S^-2 A)^-1 of the weighted least-squares fit is propagated linearly:
dZ/dc_k = Int T_k(x) exp(p(q) + i mu q) dq, one more Fourier integral of the
same kind, so that for R = Z(mu)/Z(0) and v_k = (dR/dc_k)/R,
  E|dR|^2 = |R|^2 (Re v^T C Re v + Im v^T C Im v).
With jackknife replicas the neighbouring degrees (whose change of the value is
the model error) are refitted in every resample too, so that the statistical
spread of that change is known: a model error no larger than three times it
is noise of the larger fits, and is labelled so.
The covariance route is linear: where the analytic continuation amplifies
noise strongly (large mu, high degree) the replica routes are the safer
reference, and they agree with it where both apply (tests/test_uncertainty.py).
"""
import dataclasses

import mpmath
import numpy as np

from signfree import engine
from signfree.models.chebyshev import _basis, _design, _fit_data, fit_degree
from signfree.models.piecewise import PiecewiseModel

METHODS = ("auto", "jackknife", "bootstrap", "covariance", "none")


def choose_method(density, method="auto", model_label="chebyshev"):
    """The error route for a density: 'auto' takes the jackknife when there
    are at least two replicas, the covariance route when there are per-point
    errors or counts, and none otherwise. For the piecewise model the
    covariance route propagates the errors by Monte Carlo draws
    (:func:`perturbed_values`)."""
    n_rep = len(density.replica_labels)
    if method != "auto":
        if method in ("jackknife", "bootstrap") and n_rep < 2:
            raise ValueError(f"--errors {method} needs at least 2 replicas; "
                             f"{density.source} has {max(n_rep, 1)}")
        if method == "covariance" and density.error is None and density.kind != "histogram":
            raise ValueError(f"--errors covariance needs per-point errors; {density.source} "
                             "has none")
        return method
    if n_rep >= 2:
        return "jackknife"
    if density.error is not None or density.kind == "histogram":
        return "covariance"
    return "none"


PIECEWISE_DRAWS = 64


def perturbed_values(density, draws=PIECEWISE_DRAWS, seed=0):
    """(values, None) of ``draws`` Monte Carlo copies of the data: each value
    moved by a normal deviate of its stated error, or each count drawn anew
    from a Poisson law with the measured count as its mean (the propagation
    of the errors of a model that is not linear in the data; common
    practice)."""
    rng = np.random.default_rng(seed)
    if density.kind == "histogram":
        return [(rng.poisson(density.value).astype(float), None) for _ in range(draws)]
    return [(density.value + rng.normal(0, 1, len(density.value)) * density.error, None)
            for _ in range(draws)]


def student_factor(nu):
    """t_nu quantile at 0.8413 (the one-sigma point of a normal) over the
    normal's, so that a standard error estimated with nu degrees of
    freedom, times this factor, gives a one-sigma interval that covers 68%
    (Student 1908; the Cornish-Fisher expansion of the t quantile, Abramowitz
    & Stegun 26.7.5, at z = 1: 1 + 1/(2 nu) + 1/(4 nu^2) + 1/(16 nu^3))."""
    if nu is None or nu <= 0 or not np.isfinite(nu):
        return 1.0
    return 1 + 1 / (2 * nu) + 1 / (4 * nu * nu) + 1 / (16 * nu ** 3)


def coverage_factor(method, n_replicas, nu_errors=None):
    """The factor that calibrates a statistical error to one-sigma coverage:
    the jackknife over R replicas has R - 1 degrees of freedom; the
    bootstrap over R replicas underestimates the variance of a mean by
    (R - 1)/R (Efron & Tibshirani 1993, 2.3) and has R - 1 degrees of
    freedom; the covariance route has those of the errors it propagates
    (``nu_errors``, None when they are stated)."""
    R = n_replicas
    if method == "jackknife":
        return student_factor(R - 1)
    if method == "bootstrap":
        return np.sqrt(R / (R - 1)) * student_factor(R - 1)
    if method == "covariance":
        return student_factor(nu_errors)
    if method == "covariance-differences":
        return student_factor(nu_errors)
    if method == "draws":
        return student_factor(PIECEWISE_DRAWS - 1)
    return 1.0


def resampled_values(density, method, samples=200, seed=None, sigma=None):
    """(central value, fit errors) of every resample of the replicas: the
    replica mean (pooled counts for a histogram) with the central fit's
    errors ``sigma`` (pooled over neighbouring points, so that they are
    nearly free of noise; the fit is then a linear function of the data
    and the jackknife of a linear statistic is exact), or None for
    histograms (Poisson errors of the resampled counts)."""
    reps = density.replicas
    R = reps.shape[0]
    if method == "jackknife":
        picks = [np.delete(np.arange(R), i) for i in range(R)]
    else:
        rng = np.random.default_rng(seed)
        picks = [rng.integers(0, R, R) for _ in range(samples)]
    central = _fit_data(density)[2] if sigma is None else sigma
    out = []
    for idx in picks:
        sub = reps[idx]
        if density.kind == "histogram":
            out.append((sub.sum(axis=0), None))
            continue
        out.append((sub.mean(axis=0), central))
    return out


def resampled_models(density, model, values, correction=None):
    """The central model's recipe applied to every resample ((value, sigma)
    pairs from :func:`resampled_values`); ``correction`` is the central fit's
    bin correction of a histogram."""
    out = []
    for v, sigma in values:
        d = dataclasses.replace(density, value=v, replicas=None)
        if isinstance(model, PiecewiseModel):
            out.append(PiecewiseModel.from_density(d))
        elif hasattr(model, "refit"):         # models not linear in their parameters
            out.append(model.refit(d, sigma, correction))
        else:
            out.append(fit_degree(d, model.degree, model.parity, sigma=sigma,
                                  correction=correction))
    return out


def spread(method, values):
    """Statistical error of each column (mu) of resampled complex values."""
    z = np.array([[complex(v) for v in row] for row in values])
    n = z.shape[0]
    dev = np.abs(z - z.mean(axis=0)) ** 2
    if method == "jackknife":
        return np.sqrt((n - 1) / n * dev.sum(axis=0))
    return np.sqrt(dev.sum(axis=0) / (n - 1))


def spread_mp(method, rows):
    """As :func:`spread` but for values that may lie below 1e-308: each
    column is scaled by its largest magnitude first."""
    out = []
    for col in zip(*rows):
        scale = max(abs(c) for c in col)
        if scale == 0:
            out.append(mpmath.mpf(0))
            continue
        s = spread(method, [[c / scale] for c in col])[0]
        out.append(mpmath.mpf(float(s)) * scale)
    return out


def spread_relative(method, central, rows):
    """:func:`spread_mp` for acb balls, fast: each replica value is divided
    by the central value in ball arithmetic at 64 bits, the spread of the
    ratios taken in double precision and scaled back by |central| (values
    may lie far below 1e-308). A column whose central ball contains zero is
    handled by :func:`spread_mp`."""
    from flint import ctx
    out = []
    for k, z0 in enumerate(central):
        with ctx.workprec(64):
            ok = not z0.contains(0)
            ratios = [complex(float((z / z0).real.mid()), float((z / z0).imag.mid()))
                      for z in (row[k] for row in rows)] if ok else None
        if ok and all(np.isfinite(r) for r in ratios):
            mag = mpmath.hypot(engine.to_mpf(z0.real), engine.to_mpf(z0.imag))
            out.append(mpmath.mpf(float(spread(method, [[r] for r in ratios])[0])) * mag)
        else:
            col = [mpmath.mpc(engine.to_mpf(row[k].real), engine.to_mpf(row[k].imag))
                   for row in rows]
            out.append(spread_mp(method, [[c] for c in col])[0])
    return out


def propagate_differences(central, rows, step=None):
    """Linear propagation from central differences (models of
    :func:`signfree.models.nonlinear.sensitivity_models`: rows in pairs
    plus, minus per principal axis of the parameter covariance, ``step``
    standard deviations either side of the centre): the error per mu is
    sqrt(sum_i |Z_i+ - Z_i-|^2) / (2 step), with exact differences of the
    balls' midpoints (values may lie far below 1e-308)."""
    from signfree.models.nonlinear import DIFFERENCE_STEP
    step = DIFFERENCE_STEP if step is None else step
    out = []
    for k in range(len(central)):
        total = mpmath.mpf(0)
        for plus, minus in zip(rows[0::2], rows[1::2]):
            d = engine.difference(plus[k], minus[k])
            total += abs(mpmath.mpc(engine.to_mpf(d.real), engine.to_mpf(d.imag))) ** 2
        out.append(mpmath.sqrt(total) / (2 * step))
    return out


def coefficient_covariance(density, model, sigma=None, correction=None):
    """(ks, L): the fitted coefficient indices and a factor of their
    covariance C = (A^T S^-2 A)^-1 = L L^T for the weighted least-squares fit,
    from the QR factorisation of the weighted design, L = diag(1/scale) R^-1
    (Golub & Van Loan, Matrix Computations, 5.3); C built this way is
    positive semi-definite even where A^T A is near singular."""
    ks = _basis(density.kind, model.degree, model.parity)
    _, y, s = _fit_data(density, correction)
    sigma = s if sigma is None else sigma
    A = _design(density, model.domain, ks) / sigma[:, None]
    scale = np.sqrt((A * A).sum(axis=0))
    scale[scale == 0] = 1.0
    _, R = np.linalg.qr(A / scale)
    L = np.linalg.solve(R, np.eye(len(ks))) / scale[:, None]
    return ks, L


def propagate_covariance(values, gradient, ks, factor):
    """Linear propagation through the integral (module docstring). values:
    acb per mu; gradient: engine.Transform.gradient for the same ks;
    factor: L with covariance L L^T, so the variance |L^T v|^2 is never
    negative."""
    from flint import ctx
    rows, grad0 = gradient
    errs = []
    for k, z in enumerate(values):
        R = mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))
        if R == 0:
            errs.append(mpmath.mpf(0))
            continue
        v = []
        for i in range(len(ks)):
            with ctx.workprec(engine.MAX_PREC):
                g = rows[i][k] - z * grad0[i]
            v.append(complex(mpmath.mpc(engine.to_mpf(g.real), engine.to_mpf(g.imag)) / R))
        v = np.array(v)
        var = np.sum((factor.T @ v.real) ** 2) + np.sum((factor.T @ v.imag) ** 2)
        errs.append(abs(R) * mpmath.sqrt(float(var)))
    return errs
