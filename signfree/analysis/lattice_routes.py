"""The two routes of a lattice sum and the rows they give:

  smoothed  the Chebyshev model of ln P at the lattice points; stat_err from
            replicas (jackknife, bootstrap) or the fit covariance, model_err
            from the next HIGHER candidate degrees, checked against the sum
            of the measured values where that has errors;
  direct    the measured P(Q); stat_err from replicas, the blocking method on
            raw samples, or linear propagation of per-point errors (Poisson
            counts, stated errors); model_err from the stored resolution.
"""
import dataclasses

import mpmath
import numpy as np

from signfree import engine
from signfree.analysis.budget import STRUCTURE_SIGMAS
from signfree.analysis import uncertainty
from signfree.analysis.lattice_budget import (blocking_errors, direct_method, linear_errors,
                                              resolution_errors, tail_bound)
from signfree.analysis.results import Row
from signfree.engine.sums import lattice_transform
from signfree.models.chebyshev import _fit_data, candidate_degrees, fit_degree
from signfree.models.lattice import direct_model, smoothed_model


HIGHER = 4      # candidate degrees above the chosen one whose changes make model_err


def _higher_models(density, fit):
    """The Chebyshev models of the next HIGHER candidate degrees (a lattice
    sum near theta = pi/step feels the finest structure of ln P, where a
    series converges last; two degrees are too few to see that), else the
    fit's own neighbours."""
    n = len(_fit_data(density)[1])
    degrees = candidate_degrees(density.kind, n, fit.model.parity)
    if fit.model.degree not in degrees:
        return list(fit.next_models)
    i = degrees.index(fit.model.degree)
    above = degrees[i + 1:i + 1 + HIGHER]
    if not above:
        return list(fit.next_models)
    sigma = _fit_data(density)[2]
    return [fit.candidates.get(d) or fit_degree(density, d, fit.model.parity, sigma=sigma)
            for d in above]


def smoothed_route(density, mus, s, lattice, complete, fit):
    """The Chebyshev model of ln P at the lattice points, its neighbours and
    resamples in one batch: values, stat_err, model_err (module docstring)."""
    central = smoothed_model(fit.model, lattice, complete)
    neighbours = [smoothed_model(m, lattice, complete) for m in _higher_models(density, fit)]
    method = uncertainty.choose_method(density, s.errors, "chebyshev")
    batch = [central] + neighbours
    resamples, neighbour_resamples, gradient, seed = [], [], (), s.seed
    if method in ("jackknife", "bootstrap"):
        if method == "bootstrap" and seed is None:
            seed = int(np.random.SeedSequence().entropy % (1 << 32))
        values = uncertainty.resampled_values(density, method, s.bootstrap_samples, seed)
        resamples = [smoothed_model(m, lattice, complete)
                     for m in uncertainty.resampled_models(density, fit.model, values)]
        if method == "jackknife":
            neighbour_resamples = [[smoothed_model(x, lattice, complete) for x in
                                    uncertainty.resampled_models(density, m.base, values)]
                                   for m in neighbours]
    elif method == "covariance":
        ks, factor = uncertainty.coefficient_covariance(density, fit.model)
        gradient = ks
    extra = resamples + [m for group in neighbour_resamples for m in group]
    tr = lattice_transform(batch + extra, mus, digits=s.digits, check_rows=len(batch),
                           gradient=gradient)
    K, n_res = len(tr.mus), len(resamples)
    rep_rows = tr.values[len(batch):len(batch) + n_res]
    if resamples:
        stat = uncertainty.spread_relative(method, tr.values[0], rep_rows)
        obs = {"resamples": resamples, "method": method}
    elif gradient:
        stat = uncertainty.propagate_covariance(tr.values[0], tr.gradient, ks, factor)
        obs = {"directions": _directions(fit.model, ks, factor, lattice, complete)}
    else:
        stat, obs = [None] * K, {}
    model_err, model_noise = [None] * K, [None] * K
    if neighbours:
        diffs = [[engine.difference(tr.values[0][k], tr.values[i][k]) for k in range(K)]
                 for i in range(1, len(batch))]
        noise = []
        for i, group in enumerate(neighbour_resamples, 1):
            first = len(batch) + n_res * i
            rows_i = [[engine.difference(a, b) for a, b in zip(rep_rows[j], tr.values[first + j])]
                      for j in range(n_res)]
            noise.append(uncertainty.spread_relative(method, diffs[i - 1], rows_i))
        # with the covariance route each change also carries the statistical
        # error of the higher fit, since that fit's own noise hides part of the
        # truncation it measures (a slowly converging series)
        own = _neighbour_noise(density, neighbours, tr.mus) if gradient else None
        for k in range(K):
            size = [engine.upper(diffs[i][k]) + (own[i][k] if own else 0)
                    for i in range(len(diffs))]
            i = max(range(len(diffs)), key=lambda i: size[i])
            model_err[k] = size[i]
            model_noise[k] = noise[i][k] if noise else None
    return {"transform": tr, "central": central, "neighbours": neighbours, "stat": stat,
            "model_err": model_err, "model_noise": model_noise,
            "model_err_is": f"the largest change of the value when the Chebyshev degree is "
                            f"raised through the next {HIGHER} candidates (with the "
                            "covariance route plus the statistical error of the higher fit), "
                            "and at least the difference from the sum of the measured values "
                            "where the two disagree beyond their errors",
            "errors": uncertainty_text(method, density, s.bootstrap_samples),
            "bootstrap_seed": seed if method == "bootstrap" else None,
            "twin": (fit.model, tr.values[0]), "observable_errors": obs}


def _neighbour_noise(density, neighbours, mus):
    """Statistical error per mu of each neighbour model's sum, by linear
    propagation of its own fit covariance."""
    out = []
    for m in neighbours:
        ks, factor = uncertainty.coefficient_covariance(density, m.base)
        tr = lattice_transform([m], mus, digits=3, gradient=ks)
        out.append([e or 0 for e in uncertainty.propagate_covariance(tr.values[0], tr.gradient,
                                                                     ks, factor)])
    return out


def check_against_measured(smoothed, direct):
    """The smoothed sums against the sums of the measured values (when those
    carry statistical errors): where |S - D| exceeds stat_S + model_S +
    2 stat_D the smoothing has failed, and the smoothed model_err (changed in
    place) becomes at least |S - D|; everywhere it is at least twice the
    statistical error of the measured sum (structure below the noise).
    Returns a summary for summary.json, or None."""
    d_stat = direct["stat"]
    if any(e is None for e in d_stat):
        return None
    tr, dt = smoothed["transform"], direct["transform"]
    stat, model_err = smoothed["stat"], smoothed["model_err"]
    failed = []
    for k in range(len(tr.mus)):
        diff = engine.upper(engine.difference(tr.values[0][k], dt.values[0][k]))
        allowed = (stat[k] or 0) + (model_err[k] or 0) + 2 * d_stat[k] \
            + tr.quad_err[0][k] + dt.quad_err[0][k]
        if diff > allowed:
            model_err[k] = max(model_err[k] or 0, diff)
            failed.append(float(tr.mus[k]))
    # a smoothed value is no better determined than the data's own sum: a
    # ripple in ln P below the noise (invisible to the fit) moves Z by about
    # that much at any theta (signfree.analysis.budget), so the noise of the
    # measured sum is a floor under the smoothed model error
    floor = [STRUCTURE_SIGMAS * e for e in d_stat]
    smoothed["structure"] = floor
    for k in range(len(tr.mus)):
        model_err[k] = max(model_err[k] or 0, floor[k])
    return {"against": "the sum of the measured values (" + direct["errors"] + ")",
            "disagree_at": failed}


def rows_of(out, digits):
    """Results rows of one route. A tail T beyond the range (relative to
    Z(0)) moves the numerator and Z(0) by at most T each, so the ratio by at
    most (1 + |value|) T."""
    tr, central = out["transform"], out["central"]
    tail = tail_bound(central)
    rows = []
    with mpmath.workdps(digits + 10):
        for k, mu in enumerate(tr.mus):
            z = tr.values[0][k]
            value = mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))
            rows.append(Row(mu=mu, value=value, quad_err=tr.quad_err[0][k],
                            model_err=out["model_err"][k], edge_err=(1 + abs(value)) * tail,
                            stat_err=out["stat"][k], model_noise=out["model_noise"][k],
                            resolved=tr.resolved[k], degree=central.degree, digits=digits,
                            structure_err=out.get("structure", [None] * len(tr.mus))[k]))
    return rows


def _directions(model, ks, factor, lattice, complete):
    """Pairs of models moved by -+ h along each independent direction of the
    fit covariance C = L L^T (the columns of L), for linear error
    propagation into the theta observables by central differences."""
    h = 1e-3
    out = []
    for i in range(factor.shape[1]):
        pair = []
        for sign in (-h, h):
            coef = model.coef.copy()
            coef[ks] += sign * factor[:, i]
            pair.append(smoothed_model(dataclasses.replace(model, coef=coef), lattice, complete))
        out.append((pair[0], pair[1], 2 * h))
    return out


def direct_route(density, mus, s, lattice, complete, fit, samples):
    """The measured P(Q) summed as they are, with their resamples (and the
    smoothed model riding along for the aliasing report): values, stat_err,
    model_err (module docstring)."""
    central = direct_model(density, lattice, complete=complete)
    if fit is not None and fit.consistent:
        # the tail beyond the range continues with the fitted slope at each end
        # (counts at an edge are too few to give one)
        ends = [float(fit.model.derivative(q)) for q in central.domain]
        central = dataclasses.replace(central, tail_slopes=tuple(ends))
    method = direct_method(density, s.errors, samples)
    batch, resamples, seed = [central], [], s.seed
    # independent chains are the surest witness of slow modes (tunnelling
    # between sectors) that a blocking analysis of short chains can miss
    chains = method == "blocking" and len(density.replica_labels) >= 2 \
        and density.replicas is not None
    if method in ("jackknife", "bootstrap") or chains:
        if method == "bootstrap" and seed is None:
            seed = int(np.random.SeedSequence().entropy % (1 << 32))
        how = "jackknife" if chains else method
        values = uncertainty.resampled_values(density, how, s.bootstrap_samples, seed)
        resamples = [direct_model(density, lattice, values=v, complete=complete)
                     for v, _ in values]
    twin = [smoothed_model(fit.model, lattice, complete)] if fit is not None else []
    tr = lattice_transform(batch + twin + resamples, mus, digits=s.digits, check_rows=1)
    K = len(tr.mus)
    obs, notes = {}, []
    if method == "blocking":
        stat, plateau = blocking_errors(samples, tr.mus, tr.values[0])
        if not plateau:
            notes.append("the blocking analysis of exp(i theta Q_t) reached no plateau in "
                         "some chain: its errors are lower bounds (longer or more chains "
                         "are needed)")
        if resamples:
            spread = uncertainty.spread_relative("jackknife", tr.values[0],
                                                 tr.values[1 + len(twin):])
            stat = [max(a, b) for a, b in zip(stat, spread)]
            obs = {"resamples": resamples, "method": "jackknife"}
    elif resamples:
        stat = uncertainty.spread_relative(method, tr.values[0], tr.values[1 + len(twin):])
        obs = {"resamples": resamples, "method": method}
    elif method in ("poisson", "stated"):
        stat, sigma = linear_errors(central, density, tr, method)
        obs = {"point_sigma": sigma, "slopes": density.kind == "slopes"}
    else:
        stat = [None] * K
    if method == "blocking" and not obs:
        # the histogram of the samples carries counts scaled to the effective
        # size, so the Poisson route gives the observables their errors
        obs = {"point_sigma": linear_errors(central, density, None, "poisson")[1],
               "slopes": False}
    model_err = resolution_errors(central, density, tr.values[0])
    return {"transform": tr, "central": central, "stat": stat, "model_err": model_err,
            "model_noise": [None] * K,
            "model_err_is": ("0: counts are exact" if density.kind == "histogram" else
                             "how far the values as stored (to their written resolution) can "
                             "move Z, a first-order bound"),
            "errors": uncertainty_text("chains" if chains else method, density,
                                       s.bootstrap_samples),
            "bootstrap_seed": seed if method == "bootstrap" else None, "notes": notes,
            "twin": (fit.model, tr.values[1]) if twin else None, "observable_errors": obs}


def uncertainty_text(method, density, samples):
    n_rep = max(1, len(density.replica_labels))
    return {
        "jackknife": f"delete-one jackknife over {n_rep} replicas, each summed",
        "bootstrap": f"bootstrap, {samples} resamples of {n_rep} replicas, each summed",
        "covariance": "linear propagation of the fit-coefficient covariance through the sum",
        "poisson": "linear propagation of the Poisson errors of the counts through the sum",
        "stated": "linear propagation of the stated per-point errors through the sum",
        "blocking": "blocking method (Flyvbjerg & Petersen 1989) on the series "
                    "exp(i theta Q_t) of the samples",
        "chains": f"the larger of the blocking method (Flyvbjerg & Petersen 1989) on the "
                  f"series exp(i theta Q_t) and the delete-one jackknife over {n_rep} chains",
        "none": "none",
    }[method]
