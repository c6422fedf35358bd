"""``signfree compare INPUT --mu SPEC``: every route to Z(mu)/Z(0) side by side
and where they agree, written to compare.csv."""
import sys
from datetime import datetime, timezone
from pathlib import Path

import mpmath

from signfree.analysis.compare import COLUMNS, compare
from signfree.cli.options import add_input_options

HELP = 'Chebyshev, cumulant and piecewise routes side by side'


def add_parser(subparsers):
    """The ``compare`` subcommand: signfree compare INPUT --mu SPEC [--out DIR]."""
    p = subparsers.add_parser("compare", help=HELP)
    p.add_argument("input", help="CSV file (kind slopes, log_density, histogram or samples)")
    p.add_argument("--mu", required=True, metavar="SPEC",
                   help="mu values: a comma list (0.1,0.5,1) or start:stop:count")
    p.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted (default 12)")
    p.add_argument("--max-order", type=int, default=8, dest="max_order",
                   help="highest cumulant order (default 8)")
    add_input_options(p, symmetry=False)
    p.set_defaults(handler=cmd_compare)
    return p


def compare_files(args):
    """Read and compare, and prepare compare.csv and summary.json; raises
    InputError or ValueError on bad input before anything is written."""
    from signfree.analysis.settings import check_digits, parse_mu_spec
    from signfree.io.writing import csv_text, file_sha256, json_text, package_versions
    from signfree.io.samples import read_any

    digits = check_digits(getattr(args, "digits", 12))
    max_order = getattr(args, "max_order", 8)
    if max_order < 2 or max_order > 40:
        raise ValueError(f"--max-order {max_order}: expected 2 to 40")
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


def cmd_compare(args, out=None):
    """Run ``signfree compare``; returns the exit status (2 on bad input,
    with one line on stderr and nothing written)."""
    from signfree.errors import InputError
    from signfree.io.writing import new_folder_name, write_files
    out = out or sys.stdout
    try:
        result, files = compare_files(args)
    except (InputError, ValueError) as exc:
        sys.stderr.write(f"signfree: {exc}\n")
        return 2
    folder = write_files(Path(args.out) if args.out else new_folder_name("signfree-compare"),
                         files)
    print(result.text(), file=out)
    print(f"wrote {folder / 'compare.csv'} and {folder / 'summary.json'}", file=out)
    return 0
