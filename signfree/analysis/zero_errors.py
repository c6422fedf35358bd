"""How well the data determine each zero of Z(mu), and the radius of
convergence that follows from the zeros that are determined.

A zero of the smoothed model is a zero of the true Z only as far as the
data fix Z near it. Three movements are measured for every zero z_0 found
in the model (:func:`signfree.analysis.zeros.find_zeros`):

  statistical  the zero followed by Newton's iteration into every resample
               of the data (delete-one jackknife over replicas; without
               replicas, fits drawn from the coefficient covariance), its
               spread calibrated to one-sigma coverage like the values
               (:func:`signfree.analysis.uncertainty.coverage_factor`);
  model        the largest move to the next candidate degrees;
  structure    what a ripple below the noise can do, as for the values
               (:mod:`signfree.analysis.budget`): it changes Z near z_0 by up
               to dZ = 2 sqrt(sum_j w_j ((|F(z_0 + w_j)| + |F(z_0 - w_j)|)/2)^2)
               (relative to Z(0); R(z_0) = 0), which moves the zero by
               dZ / |Z'(z_0)/Z(0)| (first order).

A zero is *stable* when every resample and neighbour carries it (Newton
converges) and its total error 3 stat + model + structure is below
STABLE_FRACTION of its distance to the nearest other zero and to 0; the
others are listed as unresolved candidates. The radius of convergence of
the cumulant series (the distance from 0 to the nearest zero of Z; Lee &
Yang 1952) is taken from stable zeros only: the nearest stable zero bounds
it from above (the series diverges past it), and a lower bound comes from
every candidate (no zero of Z lies closer to 0 than a candidate minus its
error) and from the part of the searched box around 0; when the two meet,
the radius is known.
"""
import dataclasses
from fractions import Fraction

import mpmath
import numpy as np

from signfree import engine
from signfree.analysis import budget, uncertainty
from signfree.analysis.zeros import _frac, _newton, find_zeros
from signfree.engine.complex_mu import Evaluator
from signfree.models.chebyshev import ChebyshevModel, fit_chebyshev

STABLE_FRACTION = mpmath.mpf("0.25")
DRAWS = 16


def perturbed_models(density, fit, seed=0):
    """(method, models): the central fit's recipe applied to every jackknife
    resample of the replicas, or to DRAWS coefficient vectors drawn from the
    fit covariance; ('none', []) without errors."""
    model = fit.model
    n_rep = len(density.replica_labels)
    if n_rep >= 2:
        values = uncertainty.resampled_values(density, "jackknife", sigma=fit.sigma)
        return "jackknife", uncertainty.resampled_models(density, model, values, fit.correction)
    if fit.sigma is None or fit.noise_estimated and density.error is None and \
            density.kind != "histogram":
        return "none", []
    ks, L = uncertainty.coefficient_covariance(density, model, sigma=fit.sigma,
                                               correction=fit.correction)
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(DRAWS):
        coef = np.array(model.coef, dtype=float)
        coef[ks] += L @ rng.standard_normal(len(ks))
        out.append(ChebyshevModel(coef=coef, domain=model.domain, parity=model.parity))
    return "draws", out


def _track(ev, z, box, digits=8):
    """The zero that Newton's iteration on the evaluator's model reaches from
    z (a pair of Fractions), or None."""
    w, err, ok = _newton(ev, z, 1, digits, box)
    return w if ok else None


def _spread(method, points):
    z = np.array(points, dtype=complex)
    n = len(z)
    dev = np.abs(z - z.mean()) ** 2
    if method == "jackknife":
        return float(np.sqrt((n - 1) / n * dev.sum()))
    return float(np.sqrt(dev.sum() / (n - 1)))


def _structure_shift(density, fit, zero, ev):
    """dZ / |Z'| at the zero (module docstring), as mpf."""
    res, keep = budget.residuals(density, fit.model, fit.correction, fit.sigma)
    omegas, weights, F = budget.ripple_modes(density, fit.model, fit.sigma, res,
                                             abs(float(zero.re)), keep)
    if F is None:
        return mpmath.mpf(0)
    step = Fraction(float(omegas[0])) if len(omegas) else Fraction(1)
    J = len(omegas)
    z0 = (_frac(zero.re), _frac(zero.im))
    start = (z0[0] - J * step, z0[1])
    zs, ds = ev._sums(start, (step, Fraction(0)), 2 * J + 1, ev.n_used, ev.prec)
    norm, _ = ev._sums((Fraction(0), Fraction(0)), (Fraction(0), Fraction(0)), 1, ev.n_used,
                       ev.prec)
    scale = engine.abs_mid(norm[0])
    mags = np.array([float(engine.upper(z) / scale) for z in zs])
    G = mags[J + 1:] + mags[:J][::-1]          # |F(z + w_j)| + |F(z - w_j)|, either phase
    dZ = budget.combine(weights, G)
    slope = engine.abs_mid(ds[J]) / scale
    return dZ / slope if slope > 0 else mpmath.inf


def assess(result, fit, density, seed=0):
    """The zeros of ``result`` (a ZeroResult of fit.model) with their
    statistical, model and structure errors and stability, and the radius
    of convergence from the stable ones (else a lower bound); returns a new
    ZeroResult. Zeros that the structure alone already makes unstable are
    not followed into the resamples."""
    zeros = result.zeros
    box = tuple(result.box)
    pad = max(box[1] - box[0], box[3] - box[2])
    wide = (box[0] - pad, box[1] + pad, box[2] - pad, box[3] + pad)
    ev = Evaluator(fit.model, wide, 8)
    structs = [_structure_shift(density, fit, z, ev) if fit.sigma is not None else None
               for z in zeros]
    near = [min([abs(z.value - o.value) for o in zeros if o is not z] + [abs(z.value)])
            for z in zeros]
    hopeless = [st is not None and st >= STABLE_FRACTION * n for st, n in zip(structs, near)]
    method, models = ("none", [])
    if not all(hopeless):
        method, models = perturbed_models(density, fit, seed)
    calibrate = uncertainty.coverage_factor(method, len(density.replica_labels), None)
    if method == "draws":
        calibrate = uncertainty.student_factor(DRAWS - 1)
    evaluators = {}

    def follow(model, start):
        if id(model) not in evaluators:
            evaluators[id(model)] = Evaluator(model, wide, 8)
        return _track(evaluators[id(model)], start, wide)

    out = []
    for z, struct, skip in zip(zeros, structs, hopeless):
        start = (_frac(z.re), _frac(z.im))
        moved, shifts, lost = [], [], skip or z.multiplicity != 1 or not z.converged
        if not lost:
            for m in models:
                w = follow(m, start)
                if w is None:
                    lost = True
                    break
                moved.append(complex(float(w[0]), float(w[1])))
        if not lost:
            for m in fit.next_models:
                w = follow(m, start)
                if w is None:
                    lost = True
                    break
                shifts.append(abs(complex(float(w[0]) - float(z.re), float(w[1]) - float(z.im))))
        stat = mpmath.mpf(_spread(method, moved) * calibrate) if len(moved) >= 2 else None
        model_err = mpmath.mpf(max(shifts)) if shifts else None
        out.append(dataclasses.replace(z, stat_err=stat, model_err=model_err,
                                       structure_err=struct, tracked=not lost))
    out = [dataclasses.replace(z, stable=_is_stable(z, out)) for z in out]
    return _with_radius(dataclasses.replace(result, zeros=out), method)


def zeros_of(density, box, degree=None, parity=None, digits=12):
    """(fit, result): the Chebyshev fit of a density and the zeros of its Z
    in ``box``, each assessed against the data (:func:`assess`)."""
    fit = fit_chebyshev(density, degree=degree, parity=parity)
    return fit, assess(find_zeros(fit.model, box, digits=digits), fit, density)


def total_error(z):
    """3 stat + model + structure + the numerical error of a zero."""
    return z.total_err


def _is_stable(z, zeros):
    if not z.tracked or z.multiplicity != 1 or not z.converged:
        return False
    if not mpmath.isfinite(total_error(z)):
        return False
    near = min([abs(z.value - o.value) for o in zeros if o is not z] + [abs(z.value)])
    return total_error(z) < STABLE_FRACTION * near


def _with_radius(result, method):
    """The radius from the stable zeros, when no candidate could lie nearer
    to 0; the lower bound from every candidate and the searched box."""
    notes = list(result.notes)
    stable = [z for z in result.zeros if z.stable]
    unresolved = [z for z in result.zeros if not z.stable]
    if unresolved:
        notes.append(f"{len(unresolved)} zero(s) of the smoothed model are not determined by "
                     "the data (their errors reach the distance to their neighbours or to 0, "
                     "or a resample loses them): listed as unresolved candidates, not as zeros "
                     "of Z")
    if method == "none" and any(z.tracked for z in result.zeros):
        notes.append("no replicas and no errors: the zeros carry no statistical error")
    for z in stable:
        if z.im != 0 and abs(z.im) <= total_error(z):
            notes.append(f"the zero near {mpmath.nstr(z.re, 6)} is consistent with the real "
                         "axis within its errors")
    bounds = [max(mpmath.mpf(0), abs(z) - total_error(z)) for z in result.zeros]
    if result.box_reach is not None:
        bounds.append(result.box_reach)
    lower = min(bounds, default=None)
    radius = None
    if stable:
        # the nearest zero the data determine: the series diverges past it,
        # so it bounds the radius from above (exactly, when nothing could
        # lie nearer)
        nearest = min(stable, key=abs)
        radius = abs(nearest)
        if lower is not None and lower >= radius - total_error(nearest):
            lower = radius
    if radius is None and lower is not None and lower <= 0:
        lower = None
        notes.append("no zero of the smoothed model is determined by the data: the radius of "
                     "convergence is not known")
    return dataclasses.replace(result, radius=radius, radius_lower_bound=lower, notes=notes)
