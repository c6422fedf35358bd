"""``signfree report INPUT --mu SPEC [--reference FILE]``: the analysis of
``run`` with figures and a self-contained HTML page."""
import sys
from pathlib import Path

from signfree.cli.options import add_analysis_options, read_reference
from signfree.cli.run import run_files
from signfree.report.outputs import observables_text
from signfree.report.page import report_files

HELP = 'analysis with figures and an offline HTML report'


def add_parser(subparsers):
    """Add ``report INPUT --mu SPEC [--reference FILE] [--out DIR]`` (with
    the analysis options of ``run``) to an argparse subparsers object."""
    p = subparsers.add_parser("report", help=HELP)
    p.add_argument("input", help="CSV file (kind slopes, log_density or histogram)")
    add_analysis_options(p)
    p.add_argument("--reference", metavar="FILE",
                   help="CSV with header mu,value: a known Z(mu)/Z(0) to draw beside the result")
    p.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    p.set_defaults(handler=cmd_report)
    return p


def _read_reference(path):
    try:
        return read_reference(path)
    except (OSError, ValueError, ZeroDivisionError, TypeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else exc
        raise ValueError(f"{path}: cannot read the reference (a CSV with header "
                         f"mu,value): {reason}") from None


def cmd_report(args):
    """``signfree report``: exit status 0, or 2 with one line on stderr and
    nothing written on bad input."""
    from signfree.errors import InputError
    from signfree.io.writing import new_folder_name, write_files
    try:
        reference = _read_reference(args.reference) if args.reference else None
        result, files = run_files(args.input, args)
    except (InputError, ValueError) as exc:
        sys.stderr.write(f"signfree: {exc}\n")
        return 2
    files = report_files(result, files, reference)
    folder = write_files(Path(args.out) if args.out else new_folder_name("signfree-report"),
                         files)
    print(result.table.text(reference))
    counts = ", ".join(f"{v} {k}" for k, v in result.table.status_counts().items() if v)
    print(f"statuses: {counts}")
    if result.observables is not None:
        print(observables_text(result.observables))
    figures = sum(1 for name in files if name.endswith((".png", ".pdf")))
    print(f"wrote {folder / 'report.html'}, results.csv, summary.json and "
          f"{figures} figure files in {folder}")
    return 0
