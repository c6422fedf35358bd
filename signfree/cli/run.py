"""``signfree run INPUT [INPUT ...] --mu SPEC ...``: analyse density or sample
files and write results.csv and summary.json per input (several inputs in
parallel processes with --jobs; figures with --plots)."""
import signal
import sys
from pathlib import Path

from signfree.cli.display import ProgressLine
from signfree.cli.options import (INPUT_HELP, add_analysis_options, add_figure_options,
                                  add_output_options, fail, figure_field, handler,
                                  output_folder, settings_from_args)
from signfree.report.outputs import analyse_file, report_text

HELP = "analyse density or sample files"


def add_parser(sub):
    run = sub.add_parser("run", help=HELP, description=(
        "Smooth each input's density, compute Z(mu)/Z(0) for every mu with its error "
        "budget and status, and write results.csv and summary.json."))
    run.add_argument("input", nargs="+", help=INPUT_HELP)
    add_analysis_options(run)
    add_output_options(run, several=True)
    run.add_argument("--jobs", type=int, default=1, metavar="N",
                     help="analyse several inputs in N parallel processes")
    run.add_argument("--quiet", action="store_true", help="no progress line")
    run.add_argument("--plots", action="store_true",
                     help="also write the figures (fig_fit, fig_phase, fig_depth as PNG and PDF)")
    add_figure_options(run)
    run.set_defaults(handler=cmd_run)
    return run


def run_files(input_path, args, reference=None):
    """Read, analyse and prepare the files of one run from parsed options;
    raises InputError or ValueError on bad input before anything is written."""
    settings = settings_from_args(args)
    result, files = analyse_file(input_path, args.mu, settings, kind=args.kind,
                                 volume=args.volume, symmetry=args.symmetry)
    if getattr(args, "covariance", False):
        from signfree.analysis.covariance import COLUMNS, covariance_records
        from signfree.io.writing import csv_text
        files["covariance.csv"] = csv_text(COLUMNS, covariance_records(result))
    return result, files


def _analyse_one(job):
    """Worker for one input (also in a child process): (path, report text,
    files) or (path, None, error message); only plain text crosses the
    process boundary."""
    from signfree.errors import InputError
    path, args = job
    try:
        result, files = run_files(path, args)
    except (InputError, ValueError) as exc:
        return path, None, str(exc)
    if getattr(args, "plots", False):
        from signfree.report.figures import figures_files, write_figures
        from signfree.report.observables import observable_figures
        files.update(figures_files(result, field=figure_field(args)))
        files.update(write_figures(observable_figures(result)))
    return path, report_text(result), files


def _ignore_interrupts():
    """Child processes leave Ctrl-C to the parent, which stops them."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def subfolder_names(inputs):
    """One subfolder name per input: the file's stem, numbered where stems
    repeat."""
    stems = [Path(str(p).split(".h5:")[0]).stem for p in inputs]
    return [s if stems.count(s) == 1 else f"{s}-{i + 1}" for i, s in enumerate(stems)]


@handler
def cmd_run(args):
    from signfree.io.writing import write_files
    if args.jobs < 1:
        return fail(f"--jobs {args.jobs}: expected at least 1")
    settings_from_args(args)          # option mistakes before any work
    folder = output_folder(args, "signfree-run")
    jobs = [(path, args) for path in args.input]
    outcomes = []
    with ProgressLine(len(jobs), args.quiet) as line:
        if args.jobs > 1 and len(jobs) > 1:
            import multiprocessing
            ctx = multiprocessing.get_context("spawn")
            with ctx.Pool(min(args.jobs, len(jobs)), initializer=_ignore_interrupts) as pool:
                for outcome in pool.imap(_analyse_one, jobs):
                    outcomes.append(outcome)
                    line.file_done()
        else:
            for job in jobs:
                outcomes.append(_analyse_one(job))
                line.file_done()
    failed = [message for _, result, message in outcomes if result is None]
    if failed:
        for message in failed:
            fail(message)
        return 2
    if len(outcomes) == 1:
        files = outcomes[0][2]
        places = [folder]
    else:
        names = subfolder_names(args.input)
        files = {f"{name}/{fname}": data for name, (_, _, out) in zip(names, outcomes)
                 for fname, data in out.items()}
        places = [folder / name for name in names]
    write_files(folder, files, force=args.force)
    for (path, text, out), place in zip(outcomes, places):
        sys.stdout.write(text)
        figures = sum(1 for name in out if name.startswith("fig_"))
        extra = f" and {figures} figure files" if figures else ""
        print(f"wrote {place / 'results.csv'}, {place / 'summary.json'}{extra}")
        if len(outcomes) > 1:
            print()
    return 0
