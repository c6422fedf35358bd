"""Which smoothing model an analysis uses, and whether the data are
two-phase.

Two-phase data (a first-order transition: two peaks of rho and a valley
between them) are recognised from either piece of evidence:
  - the data's ln rho has two maxima with a valley between them deeper
    than VALLEY_SIGMAS of its own error (and than VALLEY_NATS);
  - the Chebyshev series of ln rho struggles: no degree fits, or the
    chosen one is the largest candidate, and its residuals are structured
    (too few runs of equal sign: the runs test of Wald & Wolfowitz, Ann.
    Math. Statist. 11 (1940) 147, z <= -3).

``--model auto`` takes the Chebyshev series when the data show neither;
otherwise it also fits the rational model of the slope and, where there is
a valley, the two-component model, and takes among the fits whose chi^2
passes (P >= 0.05) and that put no spurious weight between the data points
the one with the smallest Akaike information criterion chi^2 + 2k (k fitted
parameters; Akaike, IEEE Trans. Autom. Control 19 (1974) 716); when none
passes, the smallest AIC, whose rows are then `misfit`.
"""
import math

import numpy as np

from signfree.analysis import budget
from signfree.models.chebyshev import P_ACCEPT, SPIKE_LIMIT, candidate_degrees, chi2_sf, \
    fit_chebyshev
from signfree.models.piecewise import PiecewiseModel

RUNS_Z = -3.0


def runs_z(residuals):
    """The Wald-Wolfowitz runs statistic of the residuals' signs: (runs -
    expected) / standard deviation; strongly negative when the residuals
    come in long stretches of one sign (structure the model misses)."""
    s = np.sign(np.asarray(residuals, dtype=float))
    s = s[s != 0]
    n = len(s)
    n1, n2 = int((s > 0).sum()), int((s < 0).sum())
    if n < 10 or n1 == 0 or n2 == 0:
        return 0.0
    runs = 1 + int((s[1:] != s[:-1]).sum())
    mean = 2.0 * n1 * n2 / n + 1
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1))
    return float((runs - mean) / math.sqrt(var)) if var > 0 else 0.0


def two_phase(density, base):
    """The evidence that the data are two-phase (module docstring), as the
    dict reported in summary.json under 'two_phase'."""
    from signfree.models.twophase import find_valley
    valley = find_valley(density)
    res, _ = budget.residuals(density, base.model, base.correction)
    z = runs_z(res)
    n_fit = len(res)
    top = candidate_degrees(density.kind, n_fit, base.model.parity)
    rising = (not base.consistent) or (bool(top) and base.model.degree >= top[-1])
    struggling = rising and z <= RUNS_Z
    evidence = []
    if valley is not None and valley["significant"]:
        evidence.append(f"two peaks of ln rho at q = {valley['peaks'][0]:.4g} and "
                        f"{valley['peaks'][1]:.4g} with a valley {valley['depth_nats']:.3g} nats "
                        f"deep at q = {valley['valley']:.4g} ({valley['depth_sigmas']:.3g} errors)")
    if struggling:
        evidence.append(f"the Chebyshev series of ln rho "
                        f"{'fits at no degree' if not base.consistent else 'needs the largest degree'}"
                        f" ({base.model.label}) and its residuals are structured (runs test z = "
                        f"{z:.3g})")
    out = {"detected": bool(evidence), "evidence": evidence, "runs_z": z,
           "chebyshev": base.model.label, "chebyshev_consistent": bool(base.consistent)}
    if valley is not None:
        out.update({k: valley[k] for k in ("peaks", "valley", "depth_nats", "depth_sigmas")})
    out["valley_found"] = valley if valley is not None and valley["significant"] else None
    return out


def _summary(fit, n, density):
    """chi^2, parameters, AIC and the verdict of one fit. Every model is
    judged with the same chi^2: the Chebyshev fit (linear in ln rho) leaves
    empty histogram bins out, so their Poisson deviance is added here as the
    nonlinear fits include it (:class:`signfree.models.nonlinear.Measured`)."""
    from signfree.models.nonlinear import Measured
    m = fit.model
    k = n - m.dof
    chi2 = m.chi2
    if getattr(fit, "solution", None) is None and fit.sigma is not None \
            and density.kind == "histogram":
        chi2 += Measured(density, fit.sigma, fit.correction).empty_deviance(m)
    p = chi2_sf(chi2, m.dof)
    passes = bool((fit.consistent or fit.noise_estimated) and fit.spurious <= SPIKE_LIMIT
                  and (p >= P_ACCEPT or fit.noise_estimated))
    return {"model": m.label, "chi2_per_dof": chi2 / max(m.dof, 1), "parameters": int(k),
            "aic": float(chi2 + 2 * k), "p": float(p), "passes": passes}


def _n_fit(density):
    return density.n_points if density.kind == "slopes" else \
        len(density.log_density_points()[1])


def _alternatives(density, base, parity, phase, which):
    """Fits of the asked alternative models; {name: fit or the reason it
    failed}."""
    from signfree.models.rational import fit_rational
    from signfree.models.twophase import fit_two_component
    out = {}
    if "rational" in which:
        fit = fit_rational(density, base, parity=parity)
        out["rational"] = fit if fit is not None else "no rational order could be fitted"
    if "two-component" in which:
        valley = phase.get("valley_found")
        if valley is None:
            out["two-component"] = "the data show no valley to start two components from"
        else:
            fit = fit_two_component(density, base, parity=parity, valley=valley)
            out["two-component"] = fit if fit is not None else \
                "no pair of components could be fitted"
    return out


def smoothing(density, model="auto", degree=None, parity=None):
    """(central model, neighbour models for the model error, fit, info) for
    the asked model; ``info`` holds 'two_phase', 'model_choice' and notes
    for summary.json and the printed report."""
    if model == "piecewise":
        piecewise = PiecewiseModel.from_density(density)
        return piecewise, [piecewise.coarsened()], None, {}
    if model == "auto" and degree is not None:
        model = "chebyshev"          # a degree is a Chebyshev degree
    base = fit_chebyshev(density, degree=degree, parity=parity)
    phase = two_phase(density, base)
    n = _n_fit(density)
    notes = []
    if model == "chebyshev":
        if phase["detected"]:
            notes.append("two-phase data (" + "; ".join(phase["evidence"]) + "); the Chebyshev "
                         "model was asked for: --model auto also tries the rational and "
                         "two-component models")
        choice = {"asked": "chebyshev", "chosen": base.model.label, "reason": "asked for",
                  "candidates": [_summary(base, n, density)]}
        return base.model, list(base.next_models), base, _info(phase, choice, notes)
    if model in ("rational", "two-component"):
        fit = _alternatives(density, base, parity, phase, [model])[model]
        if isinstance(fit, str):
            raise ValueError(f"--model {model}: {fit} ({density.source})")
        choice = {"asked": model, "chosen": fit.model.label, "reason": "asked for",
                  "candidates": [_summary(fit, n, density)]}
        if phase["detected"]:
            notes.append("two-phase data (" + "; ".join(phase["evidence"]) + ")")
        return fit.model, list(fit.next_models), fit, _info(phase, choice, notes)
    if model != "auto":
        raise ValueError(f"unknown model {model!r}")
    fits = {"chebyshev": base}
    failed = {}
    if phase["detected"] or not base.consistent:
        which = ["rational"] + (["two-component"] if phase.get("valley_found") else [])
        for name, fit in _alternatives(density, base, parity, phase, which).items():
            if isinstance(fit, str):
                failed[name] = fit
            else:
                fits[name] = fit
    summaries = {name: _summary(fit, n, density) for name, fit in fits.items()}
    passing = [name for name in fits if summaries[name]["passes"]]
    pool = passing or list(fits)
    chosen = min(pool, key=lambda name: summaries[name]["aic"])
    if len(fits) == 1:
        reason = ("the Chebyshev series fits and the data show one phase" if base.consistent
                  else "only the Chebyshev series could be fitted")
    else:
        reason = (f"smallest AIC among the models whose chi2 passes "
                  f"({', '.join(summaries[n]['model'] for n in passing)})" if passing else
                  "no model fits the data within their errors: smallest AIC, rows are misfit")
    criterion = ("the Chebyshev series unless the data are two-phase or it fits at no degree; "
                 "then the smallest AIC = chi2 + 2k among the models with P(chi2) >= 0.05 and "
                 "no spurious weight")
    choice = {"asked": "auto", "chosen": fits[chosen].model.label, "reason": reason,
              "criterion": criterion, "candidates": list(summaries.values()),
              "not_fitted": failed}
    if phase["detected"]:
        notes.append("two-phase data (" + "; ".join(phase["evidence"]) + "): chose "
                     f"{fits[chosen].model.label} ({reason})")
    elif len(fits) > 1:
        notes.append(f"no Chebyshev degree fits: chose {fits[chosen].model.label} ({reason})")
    fit = fits[chosen]
    return fit.model, list(fit.next_models), fit, _info(phase, choice, notes)


def _info(phase, choice, notes):
    phase = {k: v for k, v in phase.items() if k != "valley_found"}
    return {"two_phase": phase, "model_choice": choice, "notes": notes}
