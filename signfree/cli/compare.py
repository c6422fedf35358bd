"""``signfree compare INPUT --mu SPEC``: every route to Z(mu)/Z(0) side by side
and where they agree, written to compare.csv, with a figure of every route
against the chosen model."""
import sys
from datetime import datetime, timezone

import mpmath

from signfree.analysis.compare import COLUMNS, compare
from signfree.cli.display import ProgressLine
from signfree.cli.options import (INPUT_HELP, MU_HELP, add_input_options, add_output_options,
                                  handler, output_folder)

HELP = 'Chebyshev, cumulant and piecewise routes side by side'


def add_parser(subparsers):
    """The ``compare`` subcommand: signfree compare INPUT --mu SPEC [--out DIR]."""
    p = subparsers.add_parser("compare", help=HELP, description=(
        "Run the Chebyshev model (automatic degree and its neighbours), the cumulant "
        "expansion to orders 2, 4, ... --max-order and the piecewise reconstruction on the "
        "same data; write compare.csv, summary.json and the figure fig_compare (PNG and "
        "PDF)."))
    p.add_argument("input", help=INPUT_HELP)
    p.add_argument("--mu", required=True, metavar="SPEC", help=MU_HELP)
    add_output_options(p)
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted (default 12)")
    p.add_argument("--max-order", type=int, default=8, dest="max_order",
                   help="highest cumulant order (default 8)")
    p.add_argument("--quiet", action="store_true", help="no progress line")
    add_input_options(p, symmetry=False)
    p.set_defaults(handler=cmd_compare)
    return p


def check_max_order(max_order):
    if max_order < 2 or max_order > 40:
        raise ValueError(f"--max-order {max_order}: expected 2 to 40")
    return max_order


def compare_files(args):
    """Read and compare, and prepare compare.csv and summary.json; raises
    InputError or ValueError on bad input before anything is written."""
    from signfree.analysis.settings import check_digits, parse_mu_spec
    from signfree.io.samples import read_any
    from signfree.io.writing import csv_text, file_sha256, json_text, package_versions

    digits = check_digits(getattr(args, "digits", 12))
    max_order = check_max_order(getattr(args, "max_order", 8))
    mus = parse_mu_spec(args.mu)
    data = read_any(args.input, kind=getattr(args, "kind", None))
    result = compare(data, mus, digits=digits, max_cumulant_order=max_order)
    summary = {
        "input": {"file": str(args.input), "sha256": file_sha256(args.input),
                  "kind": data.kind, "metadata": data.metadata},
        "mu": {"spec": args.mu, "count": len(mus)},
        "reference": result.reference,
        "routes": list(result.routes),
        "radius": None if result.radius is None else mpmath.nstr(result.radius, 12),
        **result.info,
        "verdicts": result.verdicts(),
        "versions": package_versions(),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    files = {"compare.csv": csv_text(COLUMNS, result.records()),
             "summary.json": json_text(summary)}
    return result, files


@handler
def cmd_compare(args, out=None):
    """Run ``signfree compare``; returns the exit status (2 on bad input,
    with one line on stderr and nothing written)."""
    from signfree.io.writing import write_files
    out = out or sys.stdout
    folder = output_folder(args, "signfree-compare")
    with ProgressLine(1, getattr(args, "quiet", False)):
        result, files = compare_files(args)
        from signfree.report.figures import compare_figures, write_figures
        files.update(write_figures(compare_figures(result)))
    write_files(folder, files, force=getattr(args, "force", False))
    print(result.text(), file=out)
    print(f"wrote {folder / 'compare.csv'}, {folder / 'summary.json'} and "
          f"fig_compare.png/.pdf", file=out)
    return 0
