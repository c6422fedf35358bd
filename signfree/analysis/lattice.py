"""The analysis path for charges on a lattice: which lattice (option,
metadata or detection), which weights enter the exact sum (the measured P(Q)
or the smoothed model at the lattice points, and why), and the results rows
with their error budget:

  stat_err   replicas (jackknife, bootstrap) or linear propagation of the
             fit covariance (smoothed), or of independent errors of the
             measured points (Poisson counts, stated errors), or the blocking
             method on the series exp(i theta Q_t) of raw samples (direct)
  model_err  smoothed: the change when the Chebyshev degree is raised;
             direct: how far the stored values (their written resolution)
             can move Z, a first-order bound
  edge_err   the tail sum beyond the measured range (0 when the data cover
             every value the charge can take)
  quad_err   rounding only (ball radius): a finite sum has no quadrature.

Z(theta) is periodic with period 2 pi / step (up to the phase
exp(2 pi i Q_0 / step)); any theta, including pi, is summed exactly.
"""
import dataclasses
import time
from dataclasses import dataclass

import numpy as np

from signfree import engine
from signfree.analysis.lattice_budget import integral_gap
from signfree.analysis.lattice_routes import (check_against_measured, direct_route, rows_of,
                                              smoothed_route)
from signfree.analysis.results import Analysis, ResultTable
from signfree.analysis.theta import theta_observables
from signfree.errors import InputError
from signfree.io.samples import density_from_samples
from signfree.models.chebyshev import fit_chebyshev
from signfree.models.lattice import (CONTINUOUS, data_charges, direct_problem, integer_step,
                                     lattice_through, parse_step)


@dataclass(frozen=True)
class ChargeLattice:
    """The lattice a run sums over, where it came from ('option',
    'metadata', 'detected'), whether the data cover the charge's whole
    range, and the density on it (empty bins off the lattice left out)."""

    lattice: object
    source: str
    complete: bool
    density: object


def _meta_line(source, key):
    """The line of a '# key:' metadata line in the input file (for messages)."""
    try:
        with open(source, encoding="utf-8-sig") as f:
            for no, line in enumerate(f, 1):
                text = line.strip().lower()
                if text.startswith("#") and text[1:].strip().startswith(key + ":"):
                    return no
    except OSError:
        pass
    return None


def _meta_error(density, key, message):
    return InputError(density.source, f"metadata '{key}': {message}",
                      _meta_line(density.source, key))


def _stated_step(density):
    """The step the metadata state: 'step: S' or 'charge: integer |
    continuous' (None when neither is given)."""
    meta = density.metadata
    step = None
    if "step" in meta:
        try:
            step = parse_step(meta["step"])
        except ValueError as exc:
            raise _meta_error(density, "step", str(exc)) from None
    if "charge" in meta:
        word = meta["charge"].strip().lower()
        if word not in ("integer", CONTINUOUS):
            raise _meta_error(density, "charge", f"{meta['charge']!r}: expected 'integer' or "
                              "'continuous'")
        if step is None:
            step = CONTINUOUS if word == CONTINUOUS else "integer"
        elif (word == CONTINUOUS) != (step == CONTINUOUS):
            raise _meta_error(density, "charge", f"'{word}' contradicts 'step: "
                              f"{meta['step']}'")
    return step


def _complete(density, s):
    if s.complete_range is not None:
        return bool(s.complete_range)
    word = density.metadata.get("range")
    if word is None:
        return False
    if word.strip().lower() not in ("complete", "partial"):
        raise _meta_error(density, "range", f"{word!r}: expected 'complete' or 'partial'")
    return word.strip().lower() == "complete"


def _on_lattice(density, lattice):
    """The density without empty histogram bins that lie off the lattice."""
    if density.kind != "histogram" or lattice.index(density.q) is not None:
        return density
    keep = np.array([lattice.index([q]) is not None for q in density.q])
    return dataclasses.replace(
        density, q=density.q[keep], value=density.value[keep],
        width=None if density.width is None else density.width[keep],
        replicas=None if density.replicas is None else density.replicas[:, keep])


def resolve_lattice(density, s, samples=None):
    """(ChargeLattice or None for a continuous charge, notes).

    Precedence: the option (``s.step``), then the metadata ('step: S',
    'charge: integer' with the step the integers show, 'charge:
    continuous'), then detection: raw samples that are all integers are a
    lattice charge (a continuous charge is never sampled as exact
    integers). A density table on an integer grid may be a continuous
    charge tabulated there, so it keeps the integral and gets a note. When
    the metadata and the data disagree, the option settles it."""
    notes = []
    occupied = data_charges(density, occupied=True)
    shown = integer_step(samples.q if samples is not None else occupied)
    if s.step == CONTINUOUS:
        return None, notes
    if s.step is not None:
        step, source = s.step, "option"
    else:
        stated = _stated_step(density)
        if stated == CONTINUOUS:
            return None, notes
        if stated is None:
            if samples is None or shown is None:
                if shown is not None:
                    notes.append(f"the charges lie on a lattice of step {shown}: if the charge "
                                 "takes only these values (a topological charge, a "
                                 "magnetisation), Z is a periodic sum and this integral misses "
                                 "its aliased terms near mu = pi/step; say so with --step "
                                 f"{shown} or '# step: {shown}'")
                return None, notes
            step, source = parse_step(shown), "detected"
            notes.append(f"charge lattice of step {shown} detected (every sample is an "
                         "integer): Z is the periodic sum over it (--step continuous "
                         "integrates instead)")
        elif stated == "integer":
            if shown is None:
                bad = occupied[occupied != np.rint(occupied)]
                raise _meta_error(density, "charge", "'integer', but the data hold the charge "
                                  f"{float(bad[0]) if len(bad) else 'off the integers'}")
            step, source = parse_step(shown), "metadata"
            if shown > 1:
                notes.append(f"integer charge on a lattice of step {shown} (every charge "
                             f"differs from the others by a multiple of {shown})")
        else:
            step, source = stated, "metadata"
            if shown is not None and shown != step and shown % step == 0:
                raise _meta_error(density, "step", f"{meta_text(step)}, but every charge "
                                  f"lies on the coarser lattice of step {shown}: give "
                                  f"--step {meta_text(step)} or --step {shown}")
    if samples is not None and lattice_through(occupied, step) is None:
        # raw samples on a lattice the integer binning did not see (thirds,
        # halves): bin them once more, one bin per lattice point
        grid = lattice_through(samples.q, step)
        if grid is not None:
            pts = grid.points()
            half = float(step) / 2
            density, more = density_from_samples(samples, np.append(pts - half, pts[-1] + half))
            density = dataclasses.replace(density, metadata=dict(density.metadata,
                                                                 binning="lattice"))
            notes.extend(more)
            occupied = data_charges(density, occupied=True)
    lattice = lattice_through(occupied, step)
    if lattice is None:
        where = "--step" if source == "option" else "the metadata"
        raise InputError(density.source, f"the charges do not lie on a lattice of step "
                         f"{meta_text(step)} (from {where})")
    density = _on_lattice(density, lattice)
    lattice = lattice_through(data_charges(density), step)
    if lattice is None:
        raise InputError(density.source, f"the charges do not lie on a lattice of step "
                         f"{meta_text(step)}")
    spacing = integer_step(lattice.index(occupied)) if len(occupied) > 1 else None
    if spacing is not None and spacing > 1:
        notes.append(f"the data occupy only every {spacing}th point of the lattice of step "
                     f"{meta_text(step)}: the smoothed route fills the points between "
                     "(say so if the charge cannot take them)")
    return ChargeLattice(lattice, source, _complete(density, s), density), notes


def _paren(text):
    return f"({text})" if "/" in text else text


def meta_text(step):
    return str(step)


# ------------------------------------------------------------- route

def _fit(density, s):
    """The Chebyshev fit of ln P (None when there are too few points)."""
    try:
        return fit_chebyshev(density, degree=s.degree if isinstance(s.degree, int) else None,
                             parity=s.parity)
    except InputError:
        if s.lattice_route == "smoothed" or isinstance(s.degree, int):
            raise
        return None


def choose_route(density, s, lattice, fit):
    """('direct' | 'smoothed' | 'mixed', why). Auto: the measured values
    when no errors are given (exact enumerations or transfer matrices, which
    no polynomial of modest degree fits), when no Chebyshev degree fits ln P
    within its errors, or with --model piecewise; 'mixed' when a degree fits:
    per mu the measured sum where its own errors resolve it (no model
    assumption) and the smoothed sum below that noise; the smoothed model
    alone when the measured values cannot be summed point by point."""
    problem = direct_problem(density, lattice)
    if s.lattice_route == "direct":
        if problem:
            raise InputError(density.source, f"--lattice-route direct: {problem}")
        return "direct", "asked for (--lattice-route direct)"
    if s.lattice_route == "smoothed":
        return "smoothed", "asked for (--lattice-route smoothed)"
    if problem is None:
        if s.model == "piecewise":
            return "direct", "the piecewise reconstruction of lattice data is the measured values"
        if density.error_source == "none" and density.kind != "histogram":
            return "direct", ("no errors given: the values are taken as exact (an enumeration "
                              "or a transfer matrix), summed as they are")
        if fit is None:
            return "direct", "too few points for a Chebyshev fit"
        if not fit.consistent:
            chi = fit.model.chi2 / max(fit.model.dof, 1)
            return "direct", (f"no Chebyshev degree fits ln P within its errors (chi2/dof = "
                              f"{chi:.3g} at degree {fit.model.degree})")
        return "mixed", (f"Chebyshev degree {fit.model.degree} fits ln P within its errors: "
                         "each mu takes the sum of the measured values where its errors "
                         "resolve it, and the smoothed sum only below that noise")
    if fit is None:
        raise InputError(density.source, f"{problem}, and there are too few points for a "
                         "Chebyshev fit")
    return "smoothed", f"the measured values cannot be summed directly: {problem}"


# ------------------------------------------------------------- the path

def analyse_lattice(charge, mus, s, samples=None, notes=()):
    """Z(theta)/Z(0) as the exact sum over the lattice of ``charge`` (a
    :class:`ChargeLattice`) for every theta of ``mus``, as an
    :class:`Analysis` whose table carries the error budget per theta."""
    start = time.perf_counter()
    notes = list(notes)
    density, lattice, complete = charge.density, charge.lattice, charge.complete
    if s.degree == "per-mu":
        notes.append("--degree per-mu applies to the integral; the lattice sum uses the "
                     "automatic degree")
        s = s.with_(degree=None)
    if s.certify:
        notes.append("--certify changes nothing here: a finite sum has no quadrature error, "
                     "and its balls already bound the rounding")
    fit = _fit(density, s)
    route, reason = choose_route(density, s, lattice, fit)
    outs = {}
    if route in ("smoothed", "mixed"):
        outs["smoothed"] = smoothed_route(density, mus, s, lattice, complete, fit)
    if route in ("direct", "mixed") or (route == "smoothed"
                                        and direct_problem(density, lattice) is None):
        outs["direct"] = direct_route(density, mus, s, lattice, complete, fit, samples)
    rows = {name: rows_of(out, s.digits) for name, out in outs.items()}
    for out in outs.values():
        notes.extend(out.get("notes", ()))
    check = None
    if "smoothed" in outs and "direct" in outs:
        check = check_against_measured(outs["smoothed"], outs["direct"])
        rows["smoothed"] = rows_of(outs["smoothed"], s.digits)
    if route == "mixed":
        # the measured sum where its own errors resolve it two standard errors
        # away from zero (as the horizon asks); below that noise the smoothed
        # sum, the only information there
        table_rows = [d if d.status == "ok" and d.magnitude >= 2 * d.total_err else m
                      for d, m in zip(rows["direct"], rows["smoothed"])]
        main = outs["smoothed"]
    else:
        table_rows = rows[route]
        main = outs[route]
    tr, central = main["transform"], main["central"]
    volume = s.volume if s.volume is not None else density.volume
    info = {
        "model": central.label, "degree": central.degree, "parity": central.parity,
        "precision_bits": tr.prec, "precision_digits": int(tr.prec / engine.LOG2_10),
        "nodes": lattice.count, "integration": f"exact sum over {lattice.count} lattice points",
        "domain": list(central.domain), "statistical_errors": main["errors"],
        "lattice": dict(lattice.describe(), source=charge.source, complete_range=complete,
                        period=f"2 pi / {_paren(meta_text(lattice.step))}"),
        "route": route, "route_reason": reason, "model_err_is": main["model_err_is"],
        "edge_err_is": ("0: the data cover every value of the charge" if complete else
                        "(1 + |value|) T, with T the tail sum beyond the range relative to "
                        "Z(0), ln P continued geometrically with its slope at each end"),
        "notes": notes,
    }
    if route == "mixed":
        used = sum(1 for r, d in zip(table_rows, rows["direct"]) if r is d)
        info["rows_from_measured"] = used
        info["statistical_errors"] = (f"measured rows: {outs['direct']['errors']}; smoothed "
                                      f"rows: {outs['smoothed']['errors']}")
        info["model_err_is"] = (f"measured rows: {outs['direct']['model_err_is']}; smoothed "
                                f"rows: {outs['smoothed']['model_err_is']}")
    if main.get("bootstrap_seed") is not None:
        info["bootstrap_seed"] = main["bootstrap_seed"]
    if fit is not None:
        info.update({"chi2": fit.model.chi2, "dof": fit.model.dof,
                     "chi2_per_dof": fit.model.chi2 / fit.model.dof if fit.model.dof else None,
                     "degree_criterion": fit.criterion, "fit_consistent": fit.consistent,
                     "parity_test": fit.parity_test,
                     "errors_estimated_from_residuals": fit.noise_estimated})
        if "smoothed" in outs:
            info["model_err_against"] = [m.label for m in outs["smoothed"]["neighbours"]]
            notes.extend(fit.notes)
    if check is not None:
        info["check_against_measured"] = check
        if check["disagree_at"]:
            notes.append(f"the smoothed and the measured sums disagree beyond their errors at "
                         f"{len(check['disagree_at'])} mu: model_err there is at least their "
                         "difference")
    if main["errors"] == "none":
        notes.append("no replicas and no per-point errors: no statistical error "
                     "(avg_phase_err is empty)")
    if volume is None:
        notes.append("no volume given: delta_f and chi_t are left empty (use --volume)")
    twin = main.get("twin")
    if twin is not None:
        info["aliasing"] = integral_gap(twin[0], twin[1], tr.mus, tr.prec,
                                        [r.status == "ok" for r in table_rows], lattice.step)
        if info["aliasing"].get("note"):
            notes.append(info["aliasing"]["note"])
    # the moments: model-free from the measured values when those carry errors
    source = outs["direct"] if "direct" in outs and outs["direct"]["observable_errors"] \
        else main
    info["theta"] = theta_observables(source["central"], volume,
                                      neighbours=source.get("neighbours", ()),
                                      **source["observable_errors"])
    info["theta"]["from"] = "measured values" if source is outs.get("direct") else \
        "smoothed model"
    table = ResultTable(rows=table_rows, model_label=central.label, volume=volume, info=info)
    info["horizon"] = table.horizon()
    return Analysis(density=density, model=central, fit=fit, transform=tr, table=table,
                    seconds=time.perf_counter() - start)
