"""The ``signfree`` command: a thin layer over :mod:`signfree.analysis`.

    signfree run INPUT --mu SPEC [--volume V] [--model chebyshev|piecewise]
                 [--degree N] [--digits D] [--certify] [--out DIR]
    signfree demo [--out DIR]

Bad input gives one line on stderr and exit status 2, and nothing is
written.
"""
import argparse
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

DEMO_DIR = Path(__file__).resolve().parent.parent / "data" / "demo"


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        sys.stderr.write(f"{self.prog}: {message}\n")
        sys.exit(2)


def _add_analysis_options(p):
    p.add_argument("--mu", required=True, metavar="SPEC",
                   help="mu values: a comma list (0.1,0.5,1) or start:stop:count")
    p.add_argument("--volume", type=float, help="volume V for delta_f (overrides metadata)")
    p.add_argument("--kind", choices=("slopes", "log_density", "histogram"),
                   help="input kind (overrides metadata)")
    p.add_argument("--symmetry", choices=("even", "odd", "none"),
                   help="parity of ln rho (overrides metadata; default: detect)")
    p.add_argument("--model", choices=("chebyshev", "piecewise"), default="chebyshev")
    p.add_argument("--degree", type=int, help="Chebyshev degree (default: chosen from the errors)")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted (default 12)")
    p.add_argument("--certify", action="store_true",
                   help="rigorous enclosures by acb.integral per point (slower)")


def build_parser():
    parser = _Parser(prog="signfree", description="Phase factors and free-energy "
                     "differences from a measured density of states.")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    run = sub.add_parser("run", help="analyse one density file")
    run.add_argument("input", help="CSV file (kind slopes, log_density or histogram)")
    _add_analysis_options(run)
    run.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    demo = sub.add_parser("demo", help="run the pipeline on the shipped demo data")
    demo.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    return parser


def _fail(message):
    sys.stderr.write(f"signfree: {message}\n")
    return 2


def run_files(input_path, args, reference=None):
    """Read, analyse and prepare the files of one run; raises InputError or
    ValueError on bad input before anything is written."""
    from signfree.analysis import analyse, parse_mu_spec
    from signfree.output import csv_text, file_sha256, json_text, package_versions
    from signfree.reading import read_density
    from signfree.results import ResultTable

    if args.digits < 1 or args.digits > 1000:
        raise ValueError(f"--digits {args.digits}: expected 1 to 1000")
    if args.volume is not None and not args.volume > 0:
        raise ValueError(f"--volume {args.volume}: expected a positive number")
    mus = parse_mu_spec(args.mu)
    start = time.perf_counter()
    density = read_density(input_path, kind=args.kind, volume=args.volume,
                           symmetry=args.symmetry)
    result = analyse(density, mus, model=args.model, degree=args.degree, digits=args.digits,
                     certify=args.certify, volume=args.volume)
    table = result.table
    summary = {
        "input": {
            "file": str(input_path), "sha256": file_sha256(input_path), "kind": density.kind,
            "points": density.n_points, "replicas": max(1, len(density.replica_labels)),
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
    print(f"statuses: {counts}", file=out)
    if folder is not None:
        print(f"wrote {folder / 'results.csv'} and {folder / 'summary.json'}", file=out)


def cmd_run(args):
    from signfree.errors import InputError
    from signfree.output import new_folder_name, write_files
    try:
        result, files = run_files(args.input, args)
    except (InputError, ValueError) as exc:
        return _fail(str(exc))
    folder = write_files(Path(args.out) if args.out else new_folder_name(), files)
    _report(result, folder)
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
                                model="chebyshev", degree=None, digits=12, certify=False)
        result, files = run_files(DEMO_DIR / name, ns)
        outputs[Path(name).stem] = (result, files)
    base.mkdir(parents=True, exist_ok=True)
    for stem, (result, files) in outputs.items():
        folder = write_files(base / stem, files)
        _report(result, folder, reference)
        print()
    return 0


def main(argv=None):
    args = build_parser().parse_args(argv)
    if args.command == "run":
        return cmd_run(args)
    return cmd_demo(args)


if __name__ == "__main__":
    sys.exit(main())
