"""``signfree run INPUT [INPUT ...] --mu SPEC ...``: analyse density files and
write results.csv and summary.json per input (several inputs in parallel
processes with --jobs)."""
import sys
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from signfree.cli.options import add_analysis_options, fail, settings_from_args

HELP = "analyse density files"


def add_parser(sub):
    run = sub.add_parser("run", help=HELP)
    run.add_argument("input", nargs="+",
                     help="CSV file(s) (kind slopes, log_density or histogram)")
    add_analysis_options(run)
    run.add_argument("--out", metavar="DIR", help="output folder (default: a new folder); "
                     "with several inputs one subfolder per input")
    run.add_argument("--jobs", type=int, default=1, metavar="N",
                     help="analyse several inputs in N parallel processes")
    run.add_argument("--quiet", action="store_true", help="no progress display")
    run.add_argument("--plots", action="store_true",
                     help="also write the figures (fig_*.png and fig_*.pdf)")
    run.set_defaults(handler=cmd_run)
    return run


def run_files(input_path, args, reference=None):
    """Read, analyse and prepare the files of one run; raises InputError or
    ValueError on bad input before anything is written."""
    from signfree.analysis.analyse import analyse
    from signfree.analysis.results import ResultTable
    from signfree.analysis.settings import parse_mu_spec
    from signfree.io.samples import load
    from signfree.io.writing import csv_text, file_sha256, json_text, package_versions

    settings = settings_from_args(args)
    mus = parse_mu_spec(args.mu)
    start = time.perf_counter()
    density, samples, sample_notes = load(input_path, kind=args.kind, volume=args.volume,
                                          symmetry=args.symmetry)
    result = analyse(density, mus, settings, samples=samples)
    result.table.info["notes"][:0] = list(sample_notes)
    if samples is not None:
        from signfree.io.samples import binned_error
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
        "mu": {"spec": args.mu, "count": len(mus)},
        "digits_wanted": args.digits,
        **table.info,
        "statuses": table.status_counts(),
        "sign_changes": table.sign_changes(),
        "versions": package_versions(),
        "run_seconds": round(time.perf_counter() - start, 3),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    files = {"results.csv": csv_text(ResultTable.COLUMNS, table.records()),
             "summary.json": json_text(summary)}
    return result, files


def print_report(result, folder, reference=None, out=sys.stdout):
    table = result.table
    info = table.info
    fit = ""
    if info.get("chi2_per_dof") is not None:
        fit = f", chi2/dof = {info['chi2_per_dof']:.3g} ({info['degree_criterion']})"
    print(f"{result.density.source}: {result.density.kind}, {result.density.n_points} points; "
          f"model {info['model']} parity {info['parity']}{fit}", file=out)
    print(f"integration: {info['integration']}, {info['precision_digits']} digits working "
          f"precision, {info['nodes']} nodes, {result.seconds:.2f} s", file=out)
    for note in info["notes"]:
        print(f"note: {note}", file=out)
    print(table.text(reference), file=out)
    counts = ", ".join(f"{v} {k}" for k, v in table.status_counts().items() if v)
    print(f"statuses: {counts}; statistical errors: {info['statistical_errors']}", file=out)
    print(horizon_line(info["horizon"]), file=out)
    if folder is not None:
        print(f"wrote {folder / 'results.csv'} and {folder / 'summary.json'}", file=out)


def horizon_line(h):
    """The headline practitioners quote: where the signal is lost, and what
    direct reweighting would cost there."""
    if h["mu"] is None:
        return (f"horizon: no mu of the scan is resolved two standard errors away from zero "
                f"(limited by {h['reason']} at mu = {h['first_lost_mu']:g})")
    text = (f"horizon: signal to mu = {h['mu']:g} ({h['cancel_orders']:.1f} orders cancelled)")
    text += (", end of scan" if h["first_lost_mu"] is None else
             f"; lost at mu = {h['first_lost_mu']:g} ({h['reason']})")
    if h.get("naive_samples_log10") is not None:
        text += (f"; direct reweighting would need ~1e{h['naive_samples_log10']:.0f} "
                 "phase-quenched samples for the same accuracy there")
    return text


def _analyse_one(job):
    """Worker for one input (also in a child process): (path, report text,
    files) or (path, None, error message); only plain text crosses the
    process boundary."""
    import io
    from signfree.errors import InputError
    path, args = job
    try:
        result, files = run_files(path, args)
    except (InputError, ValueError) as exc:
        return path, None, str(exc)
    if getattr(args, "plots", False):
        from signfree.report.figures import figures_files
        files.update(figures_files(result))
    text = io.StringIO()
    print_report(result, None, out=text)
    return path, text.getvalue(), files


class Progress:
    """Elapsed time and files done on stderr, shown only on a terminal and
    only once a run has taken more than two seconds."""

    def __init__(self, total, quiet=False):
        self.total, self.done, self.start = total, 0, time.time()
        self.active = not quiet and sys.stderr.isatty()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        if self.active:
            self._thread.start()

    def _loop(self):
        while not self._stop.wait(0.5):
            elapsed = time.time() - self.start
            if elapsed > 2:
                width = 24
                fill = int(width * self.done / self.total)
                sys.stderr.write(f"\rsignfree [{'#' * fill}{'.' * (width - fill)}] "
                                 f"{self.done}/{self.total} files, {elapsed:.0f} s")
                sys.stderr.flush()

    def step(self):
        self.done += 1

    def close(self):
        if self.active:
            self._stop.set()
            self._thread.join()
            if time.time() - self.start > 2:
                sys.stderr.write("\r" + " " * 60 + "\r")


def cmd_run(args):
    from signfree.io.writing import new_folder_name, write_files
    if args.jobs < 1:
        return fail(f"--jobs {args.jobs}: expected at least 1")
    jobs = [(path, args) for path in args.input]
    progress = Progress(len(jobs), args.quiet)
    outcomes = []
    try:
        if args.jobs > 1 and len(jobs) > 1:
            import multiprocessing
            with multiprocessing.get_context("spawn").Pool(min(args.jobs, len(jobs))) as pool:
                for outcome in pool.imap(_analyse_one, jobs):
                    outcomes.append(outcome)
                    progress.step()
        else:
            for job in jobs:
                outcomes.append(_analyse_one(job))
                progress.step()
    finally:
        progress.close()
    failed = [message for _, result, message in outcomes if result is None]
    if failed:
        for message in failed:
            fail(message)
        return 2
    if len(outcomes) == 1:
        targets = [Path(args.out) if args.out else new_folder_name()]
    else:
        base = Path(args.out) if args.out else new_folder_name()
        base.mkdir(parents=True, exist_ok=True)
        stems = [Path(p).stem for p in args.input]
        names = [s if stems.count(s) == 1 else f"{s}-{i + 1}" for i, s in enumerate(stems)]
        targets = [base / name for name in names]
    for (path, text, files), target in zip(outcomes, targets):
        folder = write_files(target, files)
        sys.stdout.write(text)
        print(f"wrote {folder / 'results.csv'} and {folder / 'summary.json'}")
        if len(outcomes) > 1:
            print()
    return 0

