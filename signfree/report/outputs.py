"""The files and the printed summary of one analysis: results.csv,
summary.json (provenance, how the model was chosen, the horizon) and the
text a terminal shows. Used by every command and by sweeps."""
import io
import sys
import time
from datetime import datetime, timezone

import numpy as np

from signfree.analysis.analyse import analyse
from signfree.analysis.settings import parse_mu_spec
from signfree.io.samples import binned_error, load
from signfree.io.writing import csv_text, file_sha256, json_text, package_versions


def analyse_file(input_path, mu_spec, settings, kind=None, volume=None, symmetry=None):
    """Read one input file, analyse it with ``settings`` over the mu of
    ``mu_spec`` and prepare its files; returns (Analysis, {name: text}).
    Raises InputError or ValueError on bad input before anything is written."""
    mus = parse_mu_spec(mu_spec, allow_complex=True)
    start = time.perf_counter()
    density, samples, sample_notes = load(input_path, kind=kind, volume=volume,
                                          symmetry=symmetry)
    result = analyse(density, mus, settings, samples=samples)
    result.samples = samples
    result.table.info["notes"][:0] = list(sample_notes)
    if samples is not None:
        err, tau, n_eff = binned_error(samples.q, samples.weights)
        result.table.info["samples"] = {
            "count": len(samples.q), "mean_q": float(np.average(samples.q, weights=samples.weights)),
            "mean_q_err": err, "tau_int": tau, "effective_size": n_eff,
            "error_method": "blocking (Flyvbjerg & Petersen 1989)"}
    table = result.table
    summary = {
        "input": {
            "file": str(input_path), "sha256": file_sha256(input_path),
            "kind": "samples" if samples is not None else density.kind,
            "points": len(samples.q) if samples is not None else density.n_points,
            "replicas": max(1, len(density.replica_labels)),
            "errors": density.error_source, "metadata": density.metadata,
        },
        "volume": table.volume,
        "mu": {"spec": mu_spec, "count": len(mus)},
        "digits_wanted": settings.digits,
        **table.info,
        "statuses": table.status_counts(),
        "sign_changes": table.sign_changes(),
        "versions": package_versions(),
        "run_seconds": round(time.perf_counter() - start, 3),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    files = {"results.csv": csv_text(table.columns(),
                                     table.records(guard=table.GUARD_DIGITS)),
             "summary.json": json_text(summary)}
    check = getattr(result.observables, "check", None)
    if check is not None:
        files["imaginary_check.csv"] = csv_text(check.COLUMNS, check.records())
    return result, files


def print_report(result, folder, reference=None, out=sys.stdout):
    """The printed summary of one analysis: data, model, integration, notes,
    the table, statuses and the horizon."""
    table = result.table
    info = table.info
    fit = ""
    if info.get("chi2_per_dof") is not None:
        fit = f", chi2/dof = {info['chi2_per_dof']:.3g} ({info['degree_criterion']})"
    print(f"{result.density.source}: {input_text(result)}; "
          f"model {info['model']} parity {info['parity']}{fit}", file=out)
    if "lattice" in info:
        lat = info["lattice"]
        print(f"sum: exact over {lat['points']} lattice points of step {lat['step']} (period "
              f"{lat['period']}), {info['precision_digits']} digits working precision, "
              f"{result.seconds:.2f} s; route {info['route']}: {info['route_reason']}", file=out)
    else:
        print(f"integration: {info['integration']}, {info['precision_digits']} digits working "
              f"precision, {info['nodes']} nodes, {result.seconds:.2f} s", file=out)
    if info.get("misfit"):
        print(f"MISFIT: {info['misfit']}", file=out)
    choice = info.get("model_choice") or {}
    if len(choice.get("candidates", [])) > 1:
        print(f"model choice: {choice['chosen']}, {choice['reason']}", file=out)
    for note in info["notes"]:
        print(f"note: {note}", file=out)
    print(table.text(reference), file=out)
    counts = ", ".join(f"{v} {k}" for k, v in table.status_counts().items() if v)
    print(f"statuses: {counts}; statistical errors: {info['statistical_errors']}", file=out)
    phase = " [two-phase data]" if (info.get("two_phase") or {}).get("detected") else ""
    print(horizon_line(info["horizon"]) + phase, file=out)
    if info.get("theta"):
        from signfree.analysis.theta import theta_line
        print(theta_line(info["theta"]), file=out)
    if result.observables is not None:
        print(observables_text(result.observables), file=out)
    if folder is not None:
        print(f"wrote {folder / 'results.csv'} and {folder / 'summary.json'}", file=out)


def observables_text(obs):
    """The observables at real mu, the rows off the real axis and the
    imaginary-mu check, as printed after the table."""
    parts = []
    if obs.real is not None:
        parts.append("observables (value ±total error [status]):\n" + obs.real.text())
    if obs.complex is not None:
        parts.append("imaginary and complex mu:\n" + obs.complex.text())
    if obs.check is not None:
        parts.append(obs.check.line())
    return "\n".join(parts)


def input_text(result):
    """What was read, in a few words: 'slopes, 96 points', or for raw
    samples 'samples, 100000 values binned into 59 bins'."""
    density, samples = result.density, getattr(result, "samples", None)
    if samples is not None:
        return (f"samples, {len(samples.q)} values binned into {density.n_points} "
                f"{density.metadata.get('binning', '')} bins").replace("  ", " ")
    return f"{density.kind}, {density.n_points} points"


def horizon_line(h):
    """The headline practitioners quote: where the signal is lost, and what
    direct reweighting would cost there."""
    if h["mu"] is None:
        return (f"horizon: no mu of the scan is resolved two total errors away from zero "
                f"(limited by {h['reason']} at mu = {h['first_lost_mu']:g})")
    text = (f"horizon: signal to mu = {h['mu']:g} ({h['cancel_orders']:.1f} orders cancelled)")
    text += (", end of scan" if h["first_lost_mu"] is None else
             f"; lost at mu = {h['first_lost_mu']:g} ({h['reason']})")
    if h.get("naive_samples_log10") is not None:
        text += (f"; direct reweighting would need ~1e{h['naive_samples_log10']:.0f} "
                 "phase-quenched samples for the same accuracy there")
    return text


def report_text(result, reference=None):
    """:func:`print_report` as a string (without the 'wrote' line)."""
    buf = io.StringIO()
    print_report(result, None, reference, out=buf)
    return buf.getvalue()
