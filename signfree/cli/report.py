"""``signfree report INPUT --mu SPEC [--reference FILE]``: the analysis of
``run`` with figures and a self-contained HTML page; ``--compare`` and
``--zeros BOX`` add the comparison of the routes and the zeros of Z(mu)."""

from signfree.cli.display import ProgressLine
from signfree.cli.options import (INPUT_HELP, add_analysis_options, add_figure_options,
                                  add_output_options, figure_field, handler, output_folder,
                                  read_reference, settings_from_args)
from signfree.cli.run import run_files
from signfree.report.outputs import observables_text

HELP = 'analysis with figures and an offline HTML report'


def add_parser(subparsers):
    """Add ``report INPUT --mu SPEC [--reference FILE] [--compare] [--zeros BOX]
    [--out DIR]`` (with the analysis options of ``run``)."""
    p = subparsers.add_parser("report", help=HELP, description=(
        "Run the analysis of 'signfree run' and write report.html (one self-contained page "
        "with the figures, the results table, the error budget and the provenance), the "
        "figures as PNG and PDF, results.csv and summary.json."))
    p.add_argument("input", help=INPUT_HELP)
    add_analysis_options(p)
    p.add_argument("--reference", metavar="FILE",
                   help="CSV with header mu,value: a known Z(mu)/Z(0) to draw beside the result")
    p.add_argument("--compare", action="store_true",
                   help="add the comparison of every route (Chebyshev neighbours, cumulant "
                        "orders, piecewise) with its figure; writes compare.csv too")
    p.add_argument("--max-order", type=int, default=8, dest="max_order",
                   help="highest cumulant order of --compare (default 8)")
    p.add_argument("--zeros", metavar="RE0:RE1,IM0:IM1",
                   help="add the zeros of Z(mu) in this box of the complex mu plane, with "
                        "their figure; writes zeros.csv too")
    add_figure_options(p)
    add_output_options(p)
    p.add_argument("--quiet", action="store_true", help="no progress line")
    p.set_defaults(handler=cmd_report)
    return p


def _read_reference(path):
    try:
        return read_reference(path)
    except (OSError, ValueError, ZeroDivisionError, TypeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else exc
        raise ValueError(f"{path}: cannot read the reference (a CSV with header "
                         f"mu,value): {reason}") from None


def report_outputs(args):
    """(analysis, files, comparison or None, zeros or None) of one report;
    raises InputError or ValueError on bad input before anything is written."""
    from signfree.report.page import report_files
    comparison = zeros = None
    extra = {}
    reference = _read_reference(args.reference) if args.reference else None
    box = None
    if args.zeros:
        from signfree.analysis.zeros import parse_box
        box = parse_box(args.zeros)
    if args.compare:
        from signfree.cli.compare import check_max_order
        check_max_order(args.max_order)
    result, files = run_files(args.input, args)
    if args.compare:
        from signfree.analysis.compare import COLUMNS, compare
        from signfree.io.writing import csv_text
        from signfree.analysis.settings import parse_mu_spec
        data = result.samples if result.samples is not None else result.density
        comparison = compare(data, parse_mu_spec(args.mu), digits=args.digits,
                             max_cumulant_order=args.max_order)
        extra["compare.csv"] = csv_text(COLUMNS, comparison.records())
    if box is not None:
        from signfree.analysis.zeros import ContourError, ZeroResult, find_zeros
        from signfree.io.writing import csv_text
        from signfree.models.chebyshev import fit_chebyshev
        fit = result.fit if result.fit is not None else fit_chebyshev(result.density)
        try:
            zeros = find_zeros(fit.model, box, digits=args.digits)
        except ContourError as exc:
            raise ValueError(f"{exc}; try a slightly different --zeros box") from None
        extra["zeros.csv"] = csv_text(ZeroResult.COLUMNS, zeros.records())
    files = report_files(result, files, reference, comparison=comparison, zeros=zeros,
                         field=figure_field(args))
    files.update(extra)
    return result, files


@handler
def cmd_report(args):
    """``signfree report``: exit status 0, or 2 with one line on stderr and
    nothing written on bad input."""
    from signfree.io.writing import write_files
    settings_from_args(args)
    folder = output_folder(args, "signfree-report")
    with ProgressLine(1, getattr(args, "quiet", False)):
        result, files = report_outputs(args)
    write_files(folder, files, force=args.force)
    reference = _read_reference(args.reference) if args.reference else None
    print(result.table.text(reference))
    counts = ", ".join(f"{v} {k}" for k, v in result.table.status_counts().items() if v)
    print(f"statuses: {counts}")
    if result.observables is not None:
        print(observables_text(result.observables))
    figures = sum(1 for name in files if name.startswith("fig_"))
    others = ", ".join(n for n in ("compare.csv", "zeros.csv") if n in files)
    print(f"wrote {folder / 'report.html'}, results.csv, summary.json"
          f"{', ' + others if others else ''} and {figures} figure files in {folder}")
    return 0
