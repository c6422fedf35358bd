"""The ``signfree`` command: a thin layer over :mod:`signfree.analysis`.

    signfree run INPUT [INPUT ...] --mu SPEC [--volume V]
                 [--model chebyshev|piecewise] [--degree N|per-mu] [--digits D]
                 [--errors auto|jackknife|bootstrap|covariance|none]
                 [--bootstrap B] [--seed S] [--certify] [--out DIR]
                 [--jobs N] [--quiet]
    signfree demo [--out DIR]

Bad input gives one line on stderr and exit status 2, and nothing is
written.
"""
import argparse
import sys

import numpy as np
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

DEMO_DIR = Path(__file__).resolve().parent.parent / "data" / "demo"


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        sys.stderr.write(f"{self.prog}: {message}\n")
        sys.exit(2)


def add_input_options(p, symmetry=True):
    """--kind (and --symmetry): how to read an input file, shared by every
    command that reads one."""
    p.add_argument("--kind", choices=("slopes", "log_density", "histogram", "samples"),
                   help="input kind (overrides metadata)")
    if symmetry:
        p.add_argument("--symmetry", choices=("even", "odd", "none"),
                       help="parity of ln rho (overrides metadata; default: detect)")


def _add_analysis_options(p):
    p.add_argument("--mu", required=True, metavar="SPEC",
                   help="mu values: a comma list (0.1,0.5,1) or start:stop:count")
    p.add_argument("--volume", type=float, help="volume V for delta_f (overrides metadata)")
    add_input_options(p)
    p.add_argument("--model", choices=("chebyshev", "piecewise", "cumulant"), default="chebyshev",
                   help="smoothing: Chebyshev series of ln rho (default), the raw piecewise-"
                        "linear reconstruction, or the cumulant expansion to --order")
    p.add_argument("--order", type=int, default=4, metavar="K",
                   help="order of the cumulant expansion (default 4)")
    p.add_argument("--degree", type=_degree, metavar="N|per-mu",
                   help="Chebyshev degree (default: chosen from the errors); 'per-mu' picks "
                        "per mu the candidate with the smallest statistical plus model error")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted (default 12)")
    p.add_argument("--errors", default="auto",
                   choices=("auto", "jackknife", "bootstrap", "covariance", "none"),
                   help="statistical errors (default: jackknife over replicas, else "
                        "covariance propagation of per-point errors)")
    p.add_argument("--bootstrap", type=int, default=200, metavar="B",
                   help="bootstrap resamples (default 200)")
    p.add_argument("--seed", type=int, help="bootstrap seed (default: random, recorded)")
    p.add_argument("--certify", action="store_true",
                   help="rigorous enclosures by acb.integral per point (slower)")


def _degree(text):
    if text == "per-mu":
        return text
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer or 'per-mu', got {text!r}")


# subcommands whose modules are imported only when they are asked for
# (matplotlib alone costs about a second of start-up)
LAZY = {
    "zeros": ("signfree.zeros", "add_zeros_parser",
              "zeros of Z(mu) in a box of the complex mu plane"),
    "compare": ("signfree.compare", "add_compare_parser",
                "Chebyshev, cumulant and piecewise routes side by side"),
    "report": ("signfree.report", "add_report_parser",
               "analysis with figures and an offline HTML report"),
}


def build_parser(argv=None):
    parser = _Parser(prog="signfree", description="Phase factors and free-energy "
                     "differences from a measured density of states.")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    argv = sys.argv[1:] if argv is None else argv
    wanted = next((a for a in argv if not a.startswith("-")), None)
    run = sub.add_parser("run", help="analyse density files")
    run.add_argument("input", nargs="+",
                     help="CSV file(s) (kind slopes, log_density or histogram)")
    _add_analysis_options(run)
    run.add_argument("--out", metavar="DIR", help="output folder (default: a new folder); "
                     "with several inputs one subfolder per input")
    run.add_argument("--jobs", type=int, default=1, metavar="N",
                     help="analyse several inputs in N parallel processes")
    run.add_argument("--quiet", action="store_true", help="no progress display")
    run.add_argument("--plots", action="store_true",
                     help="also write the figures (fig_*.png and fig_*.pdf)")
    demo = sub.add_parser("demo", help="run the pipeline on the shipped demo data")
    demo.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    for name, (module, adder, text) in LAZY.items():
        if name == wanted:
            import importlib
            getattr(importlib.import_module(module), adder)(sub)
        else:
            sub.add_parser(name, help=text, add_help=False)
    return parser


def _fail(message):
    sys.stderr.write(f"signfree: {message}\n")
    return 2


def run_files(input_path, args, reference=None):
    """Read, analyse and prepare the files of one run; raises InputError or
    ValueError on bad input before anything is written."""
    from signfree.analysis import analyse, check_digits, parse_mu_spec
    from signfree.output import csv_text, file_sha256, json_text, package_versions
    from signfree.results import ResultTable
    from signfree.samples import load

    opt = lambda name, default=None: getattr(args, name, default)
    check_digits(args.digits)
    if args.volume is not None and not args.volume > 0:
        raise ValueError(f"--volume {args.volume}: expected a positive number")
    mus = parse_mu_spec(args.mu)
    if opt("bootstrap", 200) < 2:
        raise ValueError(f"--bootstrap {opt('bootstrap')}: expected at least 2 resamples")
    start = time.perf_counter()
    density, samples, sample_notes = load(input_path, kind=args.kind, volume=args.volume,
                                          symmetry=args.symmetry)
    result = analyse(density, mus, model=opt("model", "chebyshev"), degree=opt("degree"),
                     digits=args.digits, certify=opt("certify", False), volume=args.volume,
                     errors=opt("errors", "auto"), bootstrap_samples=opt("bootstrap", 200),
                     seed=opt("seed"), order=opt("order", 4), samples=samples)
    result.table.info["notes"][:0] = list(sample_notes)
    if samples is not None:
        from signfree.samples import binned_error
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


def _report(result, folder, reference=None, out=sys.stdout):
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
        from signfree.report import figures_files
        files.update(figures_files(result))
    text = io.StringIO()
    _report(result, None, out=text)
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
    from signfree.output import new_folder_name, write_files
    if args.jobs < 1:
        return _fail(f"--jobs {args.jobs}: expected at least 1")
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
            _fail(message)
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


def read_reference(path):
    """A CSV of mu,value (value as a decimal string) -> {Fraction(mu): mpf}."""
    import csv
    from fractions import Fraction

    import mpmath
    with open(path) as f:
        rows = [r for r in csv.reader(line for line in f if not line.startswith("#"))]
    return {Fraction(mu): mpmath.mpf(v) for mu, v in rows[1:]}


def cmd_demo(args):
    from signfree.output import new_folder_name, write_files
    if not (DEMO_DIR / "rotors_slopes.csv").exists():
        return _fail(f"demo data not found in {DEMO_DIR} (run scripts/make_demo_data.py)")
    reference = read_reference(DEMO_DIR / "rotors_exact.csv")
    base = Path(args.out) if args.out else new_folder_name("signfree-demo")
    print("signfree demo: 63 independent planar rotors (coupling b = 1) in an imaginary field;\n"
          "the exact phase factor (I0(sqrt(b^2 - mu^2)) / I0(b))^63 is printed beside the answer.\n")
    runs = [("rotors_slopes.csv", "0:3:31"), ("rotors_log_density.csv", "0:3:16"),
            ("rotors_histogram.csv", "0:1.5:7")]
    outputs = {}
    for name, spec in runs:
        ns = argparse.Namespace(mu=spec, volume=None, kind=None, symmetry=None,
                                model="chebyshev", degree=None, digits=12, certify=False,
                                errors="auto", bootstrap=200, seed=None)
        result, files = run_files(DEMO_DIR / name, ns)
        outputs[Path(name).stem] = (result, files)
    base.mkdir(parents=True, exist_ok=True)
    for stem, (result, files) in outputs.items():
        folder = write_files(base / stem, files)
        _report(result, folder, reference)
        print()
    return 0


def main(argv=None):
    args = build_parser(argv).parse_args(argv)
    if args.command == "run":
        return cmd_run(args)
    if args.command == "demo":
        return cmd_demo(args)
    return args.handler(args)


if __name__ == "__main__":
    sys.exit(main())
