"""``signfree zeros INPUT --box RE0:RE1,IM0:IM1``: zeros of Z(mu) of the
smoothed density in a box of the complex mu plane, written to zeros.csv,
with a figure of the complex mu plane."""
import sys
from datetime import datetime, timezone

from signfree.analysis.zeros import ContourError, ZeroResult, parse_box
from signfree.cli.display import ProgressLine
from signfree.cli.options import (INPUT_HELP, add_input_options, add_lattice_options,
                                  add_output_options, handler, output_folder)

HELP = 'zeros of Z(mu) in a box of the complex mu plane'
BOX_HELP = ("the box of the complex mu plane, such as 0:3,-1:1 (a box starting with a minus "
            "sign may be written --box -3:3,-1:1 or --box=-3:3,-1:1)")


def add_parser(subparsers):
    """The ``zeros`` subcommand:
    signfree zeros INPUT --box re0:re1,im0:im1 [--out DIR] [--digits D] [--degree N]"""
    p = subparsers.add_parser("zeros", help=HELP, description=(
        "Count the zeros of Z(mu) of the Chebyshev model in a box of the complex mu plane by "
        "the argument principle, refine each by Newton's iteration, and write zeros.csv, "
        "summary.json and the figure fig_zeros (PNG and PDF)."))
    p.add_argument("input", help=INPUT_HELP)
    p.add_argument("--box", required=True, metavar="RE0:RE1,IM0:IM1", help=BOX_HELP)
    add_output_options(p)
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted for each zero (default 12)")
    p.add_argument("--degree", type=int, help="Chebyshev degree (default: chosen from the errors)")
    p.add_argument("--quiet", action="store_true", help="no progress line")
    add_input_options(p)
    add_lattice_options(p)
    p.set_defaults(handler=cmd_zeros)
    return p


def zeros_files(args):
    """Read, fit, search and prepare zeros.csv and summary.json; raises
    InputError or ValueError on bad input before anything is written."""
    from signfree.analysis.settings import check_digits
    from signfree.analysis.zero_errors import zeros_of
    from signfree.io.samples import load
    from signfree.io.writing import csv_text, file_sha256, json_text, package_versions

    digits = check_digits(getattr(args, "digits", 12))
    box = parse_box(args.box)
    density, samples, sample_notes = load(args.input, kind=getattr(args, "kind", None),
                                          symmetry=getattr(args, "symmetry", None))
    data = samples if samples is not None else density
    lattice = _lattice_files(args, density, samples, data, box, digits)
    if lattice is not None:
        return lattice
    try:
        fit, result = zeros_of(density, box, degree=getattr(args, "degree", None),
                               parity=getattr(args, "symmetry", None), digits=digits)
    except ContourError as exc:
        raise ValueError(f"{exc}; try a slightly different --box") from None
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


@handler
def cmd_zeros(args, out=None):
    """Run ``signfree zeros``; returns the exit status (2 on bad input, with
    one line on stderr and nothing written)."""
    from signfree.io.writing import write_files
    out = out or sys.stdout
    folder = output_folder(args, "signfree-zeros")
    with ProgressLine(1, getattr(args, "quiet", False)):
        result, fit, files = zeros_files(args)
        if fit is not None:
            from signfree.report.figures import write_figures, zeros_figures
            files.update(write_figures(zeros_figures(result)))
    write_files(folder, files, force=getattr(args, "force", False))
    if fit is None:
        print(f"{args.input}: model {result.model}, zeros in the fugacity plane", file=out)
    else:
        print(f"{args.input}: model {fit.model.label} parity {fit.model.parity}", file=out)
    print(result.text(), file=out)
    drawn = " and fig_zeros.png/.pdf" if fit is not None else ""
    print(f"wrote {folder / 'zeros.csv'}, {folder / 'summary.json'}{drawn}", file=out)
    return 0
