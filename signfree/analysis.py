"""The whole path from a density to a results table, as one call:

    density = read_density("run.csv")
    result = analyse(density, parse_mu_spec("0:3:61"))
    print(result.table.text())

Each step is also available on its own (``fit_chebyshev``,
``PiecewiseModel.from_density``, ``model.transform``).
"""
import time
from dataclasses import dataclass
from fractions import Fraction

import mpmath
import numpy as np

from signfree import engine, uncertainty
from signfree.chebyshev import fit_chebyshev
from signfree.piecewise import PiecewiseModel
from signfree.results import ResultTable, Row, density_rises_at_edge, edge_errors

MODELS = ("chebyshev", "piecewise", "cumulant")


def check_digits(digits):
    """The --digits range every command accepts (1 to 1000)."""
    if digits < 1 or digits > 1000:
        raise ValueError(f"--digits {digits}: expected 1 to 1000")
    return digits


def parse_mu_spec(spec):
    """'0.1,0.5,1' (a list) or 'start:stop:count' (count evenly spaced values,
    both ends included) as exact fractions of the decimals written."""
    spec = spec.strip()
    try:
        if ":" in spec:
            parts = spec.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop = Fraction(parts[0].strip()), Fraction(parts[1].strip())
            count = int(parts[2].strip())
            if count < 1 or (count == 1 and start != stop):
                raise ValueError
            if count == 1:
                return [start]
            h = (stop - start) / (count - 1)
            return [start + k * h for k in range(count)]
        values = [Fraction(s.strip()) for s in spec.split(",")]
        if not values:
            raise ValueError
        return values
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"--mu {spec!r}: expected a comma list such as 0.1,0.5,1 "
                         "or start:stop:count such as 0:2:41") from None


@dataclass
class Analysis:
    """Everything one run produced: the density, the chosen model and how it
    was chosen, the engine's transform and the results table."""

    density: object
    model: object
    fit: object
    transform: object
    table: ResultTable
    seconds: float


def smoothing_models(density, model="chebyshev", degree=None, parity=None):
    """(central model, neighbour models for the truncation error, fit)."""
    if model == "chebyshev":
        fit = fit_chebyshev(density, degree=degree, parity=parity)
        return fit.model, list(fit.next_models), fit
    if model == "piecewise":
        piecewise = PiecewiseModel.from_density(density)
        return piecewise, [piecewise.coarsened()], None
    raise ValueError(f"unknown model {model!r}; expected one of {', '.join(MODELS)}")


def analyse(density, mus, model="chebyshev", degree=None, digits=12, certify=False,
            volume=None, parity=None, errors="auto", bootstrap_samples=200, seed=None,
            order=4, samples=None):
    """Smooth the density, compute Z(mu)/Z(0) for every mu and return an
    :class:`Analysis` whose table carries the error budget per mu.

    ``degree`` None chooses it from the errors, an integer fixes it, and
    'per-mu' picks for each mu the candidate minimising the combined
    statistical and model error. ``errors`` is one of
    :data:`signfree.uncertainty.METHODS`. ``model='cumulant'`` sums the
    cumulant expansion to ``order`` (cumulants from ``samples``, raw
    :class:`signfree.samples.Samples`, when given; else from a histogram's
    counts; else from the smoothed density)."""
    if model == "cumulant":
        return _analyse_cumulant(density, mus, order, digits, volume, parity, samples)
    if degree == "per-mu":
        return _analyse_per_mu(density, mus, digits, certify, volume, parity, errors,
                               bootstrap_samples, seed)
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
    tr = type(central).transform_batch(batch + extra, mus, digits=digits, certify=certify,
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


def _analyse_cumulant(density, mus, order, digits, volume, parity, samples):
    """The truncated cumulant series in closed form: model_err from the next
    non-zero order, status beyond_radius past the nearest zero of Z of the
    Chebyshev model (the series' radius of convergence)."""
    from signfree.compare import _cumulant_source, convergence_radius
    from signfree.cumulants import CumulantModel, cumulant_rows
    start = time.perf_counter()
    if order < 1:
        raise ValueError(f"--order {order}: expected at least 1")
    fit = fit_chebyshev(density, parity=parity)
    mus = engine.as_fractions(mus)
    kappa, kappa_err, source = _cumulant_source(samples if samples is not None else density,
                                                density, fit.model, order + 2)
    cm = CumulantModel(kappa=tuple(kappa), order=order, parity=fit.model.parity,
                       kappa_err=None if kappa_err is None else tuple(kappa_err))
    nxt = cm.next_order_model()
    radius, notes = convergence_radius(fit.model, mus)
    rows = cumulant_rows(cm, nxt, mus, radius=radius, digits=digits)
    volume = volume if volume is not None else density.volume
    info = {
        "model": cm.label, "degree": None, "order": order, "parity": cm.parity,
        "cumulants": [mpmath.nstr(k, 12) for k in kappa[:order]],
        "cumulant_errors": None if kappa_err is None else [mpmath.nstr(e, 3)
                                                           for e in kappa_err[:order]],
        "cumulants_from": source,
        "convergence_radius": None if radius is None else
        ("inf" if radius == mpmath.inf else float(radius)),
        "radius_from": f"zeros of Z of {fit.model.label}",
        "model_err_against": None if nxt is None else nxt.label,
        "integration": "closed form (cumulant series)", "precision_bits": 0,
        "precision_digits": digits + 10, "nodes": 0,
        "statistical_errors": "linear propagation of the cumulant errors"
        if kappa_err is not None else "none",
        "notes": list(notes) + ([] if nxt is not None else
                                ["no higher non-zero cumulant: model_err is empty"]),
    }
    table = ResultTable(rows=rows, model_label=cm.label, volume=volume, info=info)
    info["horizon"] = table.horizon()
    return Analysis(density=density, model=cm, fit=fit, transform=None, table=table,
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


def _analyse_per_mu(density, mus, digits, certify, volume, parity, errors, samples, seed):
    """Per mu, the candidate degree with the smallest combined statistical
    and model error (sqrt(stat^2 + model^2)), among the automatic choice,
    two candidates below and four above it."""
    from signfree.chebyshev import candidate_degrees
    start = time.perf_counter()
    fit = fit_chebyshev(density, parity=parity)
    n_fit = len(density.log_density_points()[1]) if density.kind != "slopes" else density.n_points
    degrees = candidate_degrees(density.kind, n_fit, fit.model.parity)
    i = degrees.index(fit.model.degree)
    window = degrees[max(0, i - 2): i + 5]
    runs = {d: analyse(density, mus, "chebyshev", d, digits, certify, volume,
                       fit.model.parity, errors, samples, seed) for d in window}
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
