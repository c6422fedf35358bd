"""The whole path from a density to a results table, as one call:

    density = read_density("run.csv")
    result = analyse(density, parse_mu_spec("0:3:61"))
    print(result.table.text())

Each step is also available on its own (``fit_chebyshev``,
``PiecewiseModel.from_density``, ``signfree.engine.transform``). What the
analysis is asked to do is one :class:`~signfree.analysis.settings.Settings`
value; keyword arguments change single fields of it.
"""
import dataclasses
import time
import mpmath
import numpy as np

from signfree import engine, progress
from signfree.analysis import budget, model_choice, observables, uncertainty
from signfree.analysis.cumulant import analyse_cumulant
from signfree.analysis.lattice import analyse_lattice, resolve_lattice
from signfree.analysis.results import Analysis, ResultTable, Row, density_rises_at_edge
from signfree.analysis.settings import MODELS, check_digits, parse_mu_spec, settings_of
from signfree.models.chebyshev import fit_chebyshev

__all__ = ["Analysis", "analyse", "smoothing_models", "parse_mu_spec", "check_digits", "MODELS"]


def smoothing_models(density, model="chebyshev", degree=None, parity=None):
    """(central model, neighbour models for the truncation error, fit)."""
    if model not in MODELS or model == "cumulant":
        raise ValueError(f"unknown model {model!r}; expected one of {', '.join(MODELS)}")
    return model_choice.smoothing(density, model, degree, parity)[:3]


def analyse(density, mus, settings=None, samples=None, **changes):
    """Smooth the density, compute Z(mu)/Z(0) for every mu and return an
    :class:`Analysis` whose table carries the error budget per mu.

    ``settings`` (:class:`~signfree.analysis.settings.Settings`, default the
    defaults) with ``changes`` applied field by field, e.g.
    ``analyse(d, mus, digits=20, errors="bootstrap")``. ``degree`` None
    chooses it from the errors, an integer fixes it, and 'per-mu' picks for
    each mu the candidate minimising the combined statistical and model
    error. ``model='cumulant'`` sums the cumulant expansion to ``order``
    (cumulants from ``samples``, raw :class:`signfree.io.samples.Samples`,
    when given; else from a histogram's counts; else from the smoothed
    density). ``observables`` (e.g. 'n,chi,q^2') adds those at every mu
    (``Analysis.observables``); mu off the real axis and an
    ``imaginary_reference`` are handled there too."""
    s = settings_of(settings, **changes)
    mus, off_axis = observables.split_mus(mus)
    if s.model == "auto" and observables.wanted(s, off_axis):
        s = s.with_(model="chebyshev")      # observables rest on the Chebyshev model
    if s.model == "cumulant":
        reference = _analyse_fixed(density, mus, s.with_(model="chebyshev",
                                                         degree=None if s.degree == "per-mu"
                                                         else s.degree))
        result = analyse_cumulant(density, mus, s, samples, reference)
    else:
        # charges on a lattice: the periodic sum (signfree.analysis.lattice)
        charge, notes = resolve_lattice(density, s, samples)
        if charge is not None:
            return analyse_lattice(charge, mus, s, samples, notes)
        if s.degree == "per-mu":
            result = _analyse_per_mu(density, mus, s)
        else:
            result = _analyse_fixed(density, mus, s)
        result.table.info["notes"].extend(notes)
    if observables.wanted(s, off_axis):
        observables.attach_observables(result, off_axis, s)
    return result


def _analyse_fixed(density, mus, s):
    """One smoothing model (asked for or chosen) at one order (given or chosen)."""
    start = time.perf_counter()
    progress.report(f"fitting the {s.model} model")
    central, neighbours, fit, choice = model_choice.smoothing(density, s.model, s.degree,
                                                              s.parity)
    method = uncertainty.choose_method(density, s.errors, central.label)
    seed = s.seed
    batch = [central] + neighbours
    correction = fit.correction if fit is not None else None
    resamples, neighbour_resamples = [], []
    if method == "covariance" and fit is None:
        # the piecewise model is not linear in the data: propagate by draws
        method = "draws"
        resamples = uncertainty.resampled_models(density, central,
                                                 uncertainty.perturbed_values(density))
    elif method == "covariance" and hasattr(fit, "sensitivity_models"):
        # a model not linear in its parameters: central differences along
        # the principal axes of their covariance, propagated linearly
        method = "covariance-differences"
        resamples = fit.sensitivity_models()
    if method in ("jackknife", "bootstrap"):
        if method == "bootstrap" and seed is None:
            seed = int(np.random.SeedSequence().entropy % (1 << 32))
        progress.report(f"refitting the {method} resamples")
        values = uncertainty.resampled_values(density, method, s.bootstrap_samples, seed,
                                              fit.sigma if fit is not None else None)
        resamples = uncertainty.resampled_models(density, central, values, correction)
        if method == "jackknife":
            neighbour_resamples = [uncertainty.resampled_models(density, m, values, correction)
                                   for m in neighbours]
    gradient = ()
    if method == "covariance":
        ks, factor = uncertainty.coefficient_covariance(
            density, central, sigma=fit.sigma if fit is not None else None, correction=correction)
        gradient = ks
    extra = resamples + [m for group in neighbour_resamples for m in group]
    tr = engine.transform(batch + extra, mus, digits=s.digits, certify=s.certify,
                          check_rows=len(batch), gradient=gradient)
    K = len(tr.mus)
    n_res = len(resamples)
    rep_rows = tr.values[len(batch):len(batch) + n_res]
    if method == "covariance-differences":
        stat = uncertainty.propagate_differences(tr.values[0], rep_rows)
    elif resamples:
        stat = uncertainty.spread_relative("bootstrap" if method == "draws" else method,
                                           tr.values[0], rep_rows)
    elif method == "covariance":
        stat = uncertainty.propagate_covariance(tr.values[0], tr.gradient, ks, factor)
    else:
        stat = [None] * K
    calibrate = uncertainty.coverage_factor(method, len(density.replica_labels),
                                            fit.sigma_dof if fit is not None else None)
    stat = [None if e is None else e * calibrate for e in stat]
    # per neighbour: the change of the value, and (jackknife) its spread
    diffs, diff_noise = [], []
    for i in range(1, len(batch)):
        diffs.append([engine.difference(tr.values[0][k], tr.values[i][k]) for k in range(K)])
        if neighbour_resamples:
            first = len(batch) + n_res * i
            rows_i = [[engine.difference(a, b) for a, b in zip(rep_rows[j], tr.values[first + j])]
                      for j in range(n_res)]
            diff_noise.append(uncertainty.spread_relative(method, diffs[-1], rows_i))
    spurious = mpmath.mpf(fit.spurious) if fit is not None else mpmath.mpf(0)
    fit_ok = fit is None or fit.consistent or fit.noise_estimated
    rows = []
    with mpmath.workdps(s.digits + 10):  # the values keep every digit asked for
        values = [_mpc(z) for z in tr.values[0]]
        edges = budget.edge_errors(central, tr.log_z0[0], values, tr.mus)
        structure = _structure(density, central, fit, values, tr.mus)
        floor = (budget.piecewise_floor(central, tr.log_z0[0], values, tr.mus)
                 if fit is None else [None] * K)
        for k, mu in enumerate(tr.mus):
            model_err = model_noise = None
            if diffs:
                i = max(range(len(diffs)), key=lambda i: engine.upper(diffs[i][k]))
                model_err = engine.upper(diffs[i][k])
                model_noise = diff_noise[i][k] if diff_noise else None
            if floor[k] is not None:
                model_err = max(model_err or 0, floor[k])
            if structure[k] is not None:
                model_err = max(model_err or 0, structure[k])
            if spurious > 0:
                model_err = (model_err or 0) + spurious * (1 + abs(values[k]))
            rows.append(Row(mu=mu, value=values[k], quad_err=tr.quad_err[0][k],
                            model_err=model_err, edge_err=edges[k], stat_err=stat[k],
                            model_noise=model_noise, resolved=tr.resolved[k],
                            degree=central.degree, digits=s.digits, fit_ok=fit_ok,
                            structure_err=structure[k]))
    volume = s.volume if s.volume is not None else density.volume
    info = {
        "model": central.label,
        "degree": central.degree,
        "parity": central.parity,
        "precision_bits": tr.prec,
        "precision_digits": int(tr.prec / engine.LOG2_10),
        "nodes": tr.nodes,
        "integration": tr.method,
        "domain": list(central.domain),
        "statistical_errors": _describe_errors(method, density, s.bootstrap_samples),
        "hidden_weight": _float_or_inf(budget.hidden_mass(central, tr.log_z0[0])),
        "notes": list(choice.get("notes", [])),
        **{k: v for k, v in choice.items() if k != "notes"},
    }
    if method == "bootstrap":
        info["bootstrap_seed"] = seed
    if fit is not None:
        info.update({
            "chi2": central.chi2, "dof": central.dof,
            "chi2_per_dof": central.chi2 / central.dof if central.dof else None,
            "chi2_scale": fit.chi2_scale,
            "degree_criterion": fit.criterion, "fit_consistent": fit.consistent,
            "model_err_against": [m.label for m in neighbours],
            "spurious_weight": fit.spurious,
            "parity_test": fit.parity_test, "errors_estimated_from_residuals": fit.noise_estimated,
        })
        if density.kind == "histogram":
            info["histogram_fit"] = "bin integrals of the model (ln((count + 1/2)/width) corrected)"
        info["notes"].extend(fit.notes)
        if not fit_ok:
            kind = central.label.split(":")[0]
            info["misfit"] = (f"chi2/dof = {central.chi2 / max(central.dof, 1):.3g} at "
                              f"{central.label}: no {kind} order fits the data within their "
                              "errors; every row has the status misfit")
    else:
        info["model_err_against"] = "piecewise through every other knot"
    if method == "none":
        why = ("--errors none" if s.errors == "none" else "no replicas and no per-point errors")
        info["notes"].append(f"{why}: no statistical error (avg_phase_err is empty), so the "
                             "horizon rests on the other errors")
    if density_rises_at_edge(central):
        info["notes"].append("ln rho does not fall towards an end of the data range: the range "
                             "cuts off part of the density and edge_err is large")
    if volume is None:
        info["notes"].append("no volume given: delta_f is left empty (use --volume)")
    table = ResultTable(rows=rows, model_label=central.label, volume=volume, info=info)
    info["horizon"] = table.horizon()
    return Analysis(density=density, model=central, fit=fit, transform=tr, table=table,
                    seconds=time.perf_counter() - start,
                    replica_rows=(method, len(batch), n_res) if resamples else None)


def _structure(density, model, fit, values, mus):
    """The structure bound per mu (:mod:`signfree.analysis.budget`), or
    None per mu where the data carry no errors to bound it with."""
    sigma = fit.sigma if fit is not None else density.error
    if sigma is None:
        return [None] * len(mus)
    res, keep = budget.residuals(density, model, fit.correction if fit is not None else None,
                                 sigma)
    if fit is None:
        res = np.zeros_like(res)   # the piecewise model passes through its data
    if density.kind == "histogram" and fit is None:
        sigma = 1 / np.sqrt(density.value[keep])
    return budget.structure_errors(density, model, sigma, res, values, mus, keep)


def _float_or_inf(x):
    return float(x) if mpmath.isfinite(x) else "inf"


def _mpc(z):
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def _describe_errors(method, density, samples):
    n_rep = max(1, len(density.replica_labels))
    return {
        "jackknife": f"delete-one jackknife over {n_rep} replicas, refit and integrated",
        "bootstrap": f"bootstrap, {samples} resamples of {n_rep} replicas, refit and integrated",
        "covariance": "linear propagation of the fit-coefficient covariance through the integral",
        "covariance-differences": "linear propagation of the fit-parameter covariance "
                                  "(central differences of the integral along its principal "
                                  "axes)",
        "draws": f"the stated errors propagated by {uncertainty.PIECEWISE_DRAWS} Monte Carlo "
                 "draws of the data",
        "none": "none",
    }[method]


def _analyse_per_mu(density, mus, s):
    """Per mu, the candidate degree with the smallest combined statistical
    and model error (sqrt(stat^2 + model^2)), among the automatic choice,
    two candidates below and four above it (degrees the data reject are not
    candidates). So that no degree is picked because its error happens to
    be small, the model error of the row is at least the change from the
    automatically chosen degree."""
    from signfree.models.chebyshev import candidate_degrees
    start = time.perf_counter()
    fit = fit_chebyshev(density, parity=s.parity)
    n_fit = len(density.log_density_points()[1]) if density.kind != "slopes" else density.n_points
    degrees = candidate_degrees(density.kind, n_fit, fit.model.parity)
    i = degrees.index(fit.model.degree)
    window = degrees[max(0, i - 2): i + 5]
    progress.report("per-mu degree: trying degrees", detail=", ".join(map(str, window)))
    runs = {d: _analyse_fixed(density, mus, s.with_(model="chebyshev", degree=d,
                                                    parity=fit.model.parity))
            for d in window}
    base = runs[fit.model.degree]
    rows, used = [], []
    for k in range(len(base.table.rows)):
        def cost(d):
            r = runs[d].table.rows[k]
            if r.status in ("unresolved", "misfit"):
                return mpmath.inf
            return mpmath.sqrt((r.stat_err or 0) ** 2 + (r.model_err or 0) ** 2)
        best = min(window, key=lambda d: (cost(d), d))
        if cost(best) == mpmath.inf:
            best = fit.model.degree
        row = runs[best].table.rows[k]
        if best != fit.model.degree:
            with mpmath.workdps(s.digits + 10):
                shift = abs(row.value - base.table.rows[k].value)
            row = dataclasses.replace(row, model_err=max(row.model_err or 0, shift))
        rows.append(row)
        used.append(best)
    info = dict(base.table.info)
    info.update({"degree": "per-mu", "degrees_tried": window, "degrees_used": used,
                 "degree_criterion": "per mu: smallest sqrt(stat_err^2 + model_err^2) among "
                                     "the candidates the data accept; model_err at least the "
                                     "change from the automatic degree"})
    table = ResultTable(rows=rows, model_label="chebyshev:per-mu", volume=base.table.volume,
                        info=info)
    info["horizon"] = table.horizon()
    info["model"] = "chebyshev:per-mu"
    return Analysis(density=density, model=base.model, fit=fit, transform=base.transform,
                    table=table, seconds=time.perf_counter() - start)
