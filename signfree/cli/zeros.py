"""``signfree zeros INPUT --box RE0:RE1,IM0:IM1``: zeros of Z(mu) of the
smoothed density in a box of the complex mu plane, written to zeros.csv."""
import sys
from datetime import datetime, timezone
from pathlib import Path

from signfree.analysis.zeros import ContourError, ZeroResult, find_zeros, parse_box
from signfree.cli.options import add_input_options, add_lattice_options

HELP = 'zeros of Z(mu) in a box of the complex mu plane'


def add_parser(subparsers):
    """The ``zeros`` subcommand:
    signfree zeros INPUT --box re0:re1,im0:im1 [--out DIR] [--digits D] [--degree N]"""
    p = subparsers.add_parser("zeros", help=HELP)
    p.add_argument("input", help="CSV file (kind slopes, log_density, histogram or samples)")
    p.add_argument("--box", required=True, metavar="RE0:RE1,IM0:IM1",
                   help="the box of the complex mu plane, such as 0:3,-1:1 (write "
                   "--box=-3:3,-1:1 when it starts with a minus sign)")
    p.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted for each zero (default 12)")
    p.add_argument("--degree", type=int, help="Chebyshev degree (default: chosen from the errors)")
    add_input_options(p)
    add_lattice_options(p)
    p.set_defaults(handler=cmd_zeros)
    return p


def zeros_files(args):
    """Read, fit, search and prepare zeros.csv and summary.json; raises
    InputError or ValueError on bad input before anything is written."""
    from signfree.analysis.settings import check_digits
    from signfree.models.chebyshev import fit_chebyshev
    from signfree.io.writing import csv_text, file_sha256, json_text, package_versions
    from signfree.io.samples import load

    digits = check_digits(getattr(args, "digits", 12))
    box = parse_box(args.box)
    density, samples, sample_notes = load(args.input, kind=getattr(args, "kind", None),
                                          symmetry=getattr(args, "symmetry", None))
    data = samples if samples is not None else density
    lattice = _lattice_files(args, density, samples, data, box, digits)
    if lattice is not None:
        return lattice
    fit = fit_chebyshev(density, degree=getattr(args, "degree", None),
                        parity=getattr(args, "symmetry", None))
    result = find_zeros(fit.model, box, digits=digits)
    result.notes[:0] = sample_notes
    summary = {
        "input": {"file": str(args.input), "sha256": file_sha256(args.input),
                  "kind": data.kind, "metadata": data.metadata},
        **result.summary(),
        "degree": fit.model.degree, "parity": fit.model.parity,
        "degree_criterion": fit.criterion, "fit_notes": list(fit.notes),
        "evaluations": result.evaluations,
        "versions": package_versions(),
        "run_seconds": round(result.seconds, 3),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    files = {"zeros.csv": csv_text(ZeroResult.COLUMNS, result.records()),
             "summary.json": json_text(summary)}
    return result, fit, files


def _lattice_files(args, density, samples, data, box, digits):
    """For a charge on a lattice: the zeros as polynomial roots in the
    fugacity plane (signfree.analysis.fugacity); None for a continuous one."""
    from signfree.analysis.lattice import resolve_lattice
    from signfree.analysis.settings import Settings
    from signfree.io.writing import csv_text, file_sha256, json_text, package_versions
    s = Settings(digits=digits, degree=getattr(args, "degree", None),
                 parity=getattr(args, "symmetry", None), step=getattr(args, "step", None),
                 lattice_route=getattr(args, "lattice_route", None) or "auto",
                 complete_range=getattr(args, "complete_range", None))
    charge, notes = resolve_lattice(density, s, samples)
    if charge is None:
        return None
    from signfree.analysis.fugacity import find_lattice_zeros
    result = find_lattice_zeros(charge, box, s, samples, notes)
    summary = {
        "input": {"file": str(args.input), "sha256": file_sha256(args.input),
                  "kind": data.kind, "metadata": data.metadata},
        **result.summary(), "versions": package_versions(),
        "run_seconds": round(result.seconds, 3),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    return result, None, {"zeros.csv": csv_text(result.COLUMNS, result.records()),
                          "summary.json": json_text(summary)}


def cmd_zeros(args, out=None):
    """Run ``signfree zeros``; returns the exit status (2 on bad input, with
    one line on stderr and nothing written)."""
    from signfree.errors import InputError
    from signfree.io.writing import new_folder_name, write_files
    out = out or sys.stdout
    try:
        result, fit, files = zeros_files(args)
    except (InputError, ValueError) as exc:
        sys.stderr.write(f"signfree: {exc}\n")
        return 2
    except ContourError as exc:
        sys.stderr.write(f"signfree: {exc}; try a slightly different --box\n")
        return 2
    folder = write_files(Path(args.out) if args.out else new_folder_name("signfree-zeros"),
                         files)
    if fit is None:
        print(f"{args.input}: model {result.model}, zeros in the fugacity plane", file=out)
    else:
        print(f"{args.input}: model {fit.model.label} parity {fit.model.parity}", file=out)
    print(result.text(), file=out)
    print(f"wrote {folder / 'zeros.csv'} and {folder / 'summary.json'}", file=out)
    return 0
