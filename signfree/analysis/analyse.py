"""The whole path from a density to a results table, as one call:

    density = read_density("run.csv")
    result = analyse(density, parse_mu_spec("0:3:61"))
    print(result.table.text())

Each step is also available on its own (``fit_chebyshev``,
``PiecewiseModel.from_density``, ``signfree.engine.transform``). What the
analysis is asked to do is one :class:`~signfree.analysis.settings.Settings`
value; keyword arguments change single fields of it.
"""
import time
import mpmath
import numpy as np

from signfree import engine
from signfree.analysis import uncertainty
from signfree.analysis.cumulant import analyse_cumulant
from signfree.analysis.results import (Analysis, ResultTable, Row, density_rises_at_edge,
                                       edge_errors)
from signfree.analysis.settings import MODELS, check_digits, parse_mu_spec, settings_of
from signfree.models.chebyshev import fit_chebyshev
from signfree.models.piecewise import PiecewiseModel

__all__ = ["Analysis", "analyse", "smoothing_models", "parse_mu_spec", "check_digits", "MODELS"]


def smoothing_models(density, model="chebyshev", degree=None, parity=None):
    """(central model, neighbour models for the truncation error, fit)."""
    if model == "chebyshev":
        fit = fit_chebyshev(density, degree=degree, parity=parity)
        return fit.model, list(fit.next_models), fit
    if model == "piecewise":
        piecewise = PiecewiseModel.from_density(density)
        return piecewise, [piecewise.coarsened()], None
    raise ValueError(f"unknown model {model!r}; expected one of {', '.join(MODELS)}")


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
    density)."""
    s = settings_of(settings, **changes)
    if s.model == "cumulant":
        return analyse_cumulant(density, mus, s, samples)
    # charges on a lattice: the periodic sum (signfree.analysis.lattice)
    from signfree.analysis.lattice import analyse_lattice, resolve_lattice
    charge, notes = resolve_lattice(density, s, samples)
    if charge is not None:
        return analyse_lattice(charge, mus, s, samples, notes)
    if s.degree == "per-mu":
        result = _analyse_per_mu(density, mus, s)
    else:
        result = _analyse_fixed(density, mus, s)
    result.table.info["notes"].extend(notes)
    return result


def _analyse_fixed(density, mus, s):
    """The Chebyshev or piecewise path at one degree (given or chosen)."""
    model, degree, digits, certify = s.model, s.degree, s.digits, s.certify
    volume, parity, errors = s.volume, s.parity, s.errors
    bootstrap_samples, seed = s.bootstrap_samples, s.seed
    start = time.perf_counter()
    central, neighbours, fit = smoothing_models(density, model, degree, parity)
    method = uncertainty.choose_method(density, errors, central.label)
    batch = [central] + neighbours
    resamples, neighbour_resamples, gradient = [], [], ()
    if method in ("jackknife", "bootstrap"):
        if method == "bootstrap" and seed is None:
            seed = int(np.random.SeedSequence().entropy % (1 << 32))
        values = uncertainty.resampled_values(density, method, bootstrap_samples, seed)
        resamples = uncertainty.resampled_models(density, central, values)
        if method == "jackknife":
            neighbour_resamples = [uncertainty.resampled_models(density, m, values)
                                   for m in neighbours]
    elif method == "covariance":
        ks, factor = uncertainty.coefficient_covariance(density, central)
        gradient = ks
    extra = resamples + [m for group in neighbour_resamples for m in group]
    tr = engine.transform(batch + extra, mus, digits=digits, certify=certify,
                          check_rows=len(batch), gradient=gradient)
    n_res = len(resamples)
    rep_rows = tr.values[len(batch):len(batch) + n_res]
    if resamples:
        stat = uncertainty.spread_relative(method, tr.values[0], rep_rows)
    elif gradient:
        stat = uncertainty.propagate_covariance(tr.values[0], tr.gradient, ks, factor)
    else:
        stat = [None] * len(tr.mus)
    # per neighbour: the change of the value, and (jackknife) its spread
    diffs, diff_noise = [], []
    for i in range(1, len(batch)):
        diffs.append([engine.difference(tr.values[0][k], tr.values[i][k])
                      for k in range(len(tr.mus))])
        if neighbour_resamples:
            start = len(batch) + n_res * i
            rows_i = [[engine.difference(a, b) for a, b in zip(rep_rows[j], tr.values[start + j])]
                      for j in range(n_res)]
            diff_noise.append(uncertainty.spread_relative(method, diffs[-1], rows_i))
    rows = []
    edges = edge_errors(central, tr.log_z0[0], tr.mus)
    with mpmath.workdps(digits + 10):  # the values keep every digit asked for
        for k, mu in enumerate(tr.mus):
            z = tr.values[0][k]
            model_err = model_noise = None
            if diffs:
                i = max(range(len(diffs)), key=lambda i: engine.upper(diffs[i][k]))
                model_err = engine.upper(diffs[i][k])
                model_noise = diff_noise[i][k] if diff_noise else None
            rows.append(Row(mu=mu, value=_mpc(z), quad_err=tr.quad_err[0][k],
                            model_err=model_err, edge_err=edges[k], stat_err=stat[k],
                            model_noise=model_noise, resolved=tr.resolved[k],
                            degree=central.degree, digits=digits))
    volume = volume if volume is not None else density.volume
    info = {
        "model": central.label,
        "degree": central.degree,
        "parity": central.parity,
        "precision_bits": tr.prec,
        "precision_digits": int(tr.prec / engine.LOG2_10),
        "nodes": tr.nodes,
        "integration": tr.method,
        "domain": list(central.domain),
        "statistical_errors": _describe_errors(method, density, bootstrap_samples),
        "notes": [],
    }
    if method == "bootstrap":
        info["bootstrap_seed"] = seed
    if fit is not None:
        info.update({
            "chi2": central.chi2, "dof": central.dof,
            "chi2_per_dof": central.chi2 / central.dof if central.dof else None,
            "degree_criterion": fit.criterion, "fit_consistent": fit.consistent,
            "model_err_against": [m.label for m in neighbours],
            "parity_test": fit.parity_test, "errors_estimated_from_residuals": fit.noise_estimated,
        })
        info["notes"].extend(fit.notes)
    else:
        info["model_err_against"] = "piecewise through every other knot"
    if method == "none":
        info["notes"].append("no replicas and no per-point errors: no statistical error "
                             "(avg_phase_err is empty), so the horizon rests on the other errors")
    if density_rises_at_edge(central):
        info["notes"].append("ln rho does not fall towards an end of the data range: the range "
                             "cuts off part of the density and edge_err is large")
    if volume is None:
        info["notes"].append("no volume given: delta_f is left empty (use --volume)")
    table = ResultTable(rows=rows, model_label=central.label, volume=volume, info=info)
    info["horizon"] = table.horizon()
    return Analysis(density=density, model=central, fit=fit, transform=tr, table=table,
                    seconds=time.perf_counter() - start)


def _mpc(z):
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def _describe_errors(method, density, samples):
    n_rep = max(1, len(density.replica_labels))
    return {
        "jackknife": f"delete-one jackknife over {n_rep} replicas, refit and integrated",
        "bootstrap": f"bootstrap, {samples} resamples of {n_rep} replicas, refit and integrated",
        "covariance": "linear propagation of the fit-coefficient covariance through the integral",
        "none": "none",
    }[method]


def _analyse_per_mu(density, mus, s):
    """Per mu, the candidate degree with the smallest combined statistical
    and model error (sqrt(stat^2 + model^2)), among the automatic choice,
    two candidates below and four above it."""
    from signfree.models.chebyshev import candidate_degrees
    start = time.perf_counter()
    fit = fit_chebyshev(density, parity=s.parity)
    n_fit = len(density.log_density_points()[1]) if density.kind != "slopes" else density.n_points
    degrees = candidate_degrees(density.kind, n_fit, fit.model.parity)
    i = degrees.index(fit.model.degree)
    window = degrees[max(0, i - 2): i + 5]
    runs = {d: _analyse_fixed(density, mus, s.with_(model="chebyshev", degree=d,
                                                    parity=fit.model.parity))
            for d in window}
    base = runs[fit.model.degree]
    rows, used = [], []
    for k in range(len(base.table.rows)):
        def cost(d):
            r = runs[d].table.rows[k]
            if r.status == "unresolved":
                return mpmath.inf
            return mpmath.sqrt((r.stat_err or 0) ** 2 + (r.model_err or 0) ** 2)
        best = min(window, key=lambda d: (cost(d), d))
        if cost(best) == mpmath.inf:
            best = fit.model.degree
        rows.append(runs[best].table.rows[k])
        used.append(best)
    info = dict(base.table.info)
    info.update({"degree": "per-mu", "degrees_tried": window,
                 "degree_criterion": "per mu: smallest sqrt(stat_err^2 + model_err^2) among "
                                     "the candidates tried"})
    table = ResultTable(rows=rows, model_label="chebyshev:per-mu", volume=base.table.volume,
                        info=info)
    info["horizon"] = table.horizon()
    info["model"] = "chebyshev:per-mu"
    return Analysis(density=density, model=base.model, fit=fit, transform=base.transform,
                    table=table, seconds=time.perf_counter() - start)
