"""``signfree demo``: the pipeline on the shipped demo data (independent
planar rotors), with the exact phase factor printed beside the answer."""
import argparse
from pathlib import Path

from signfree.cli.display import ProgressLine
from signfree.cli.options import (add_output_options, fail, handler, output_folder,
                                  read_reference)
from signfree.cli.run import run_files
from signfree.report.outputs import print_report

HELP = "run the pipeline on the shipped demo data"
DEMO_DIR = Path(__file__).resolve().parent.parent.parent / "data" / "demo"
RUNS = [("rotors_slopes.csv", "0:3:31"), ("rotors_log_density.csv", "0:3:16"),
        ("rotors_histogram.csv", "0:1.5:7")]


def add_parser(sub):
    demo = sub.add_parser("demo", help=HELP, description=(
        "Analyse the shipped demo data (63 independent planar rotors: slopes, log_density "
        "and histogram files) and print the exact phase factor beside each answer."))
    add_output_options(demo, several=True)
    demo.add_argument("--quiet", action="store_true", help="no progress line")
    demo.set_defaults(handler=cmd_demo)
    return demo


@handler
def cmd_demo(args):
    from signfree.io.writing import write_files
    if not (DEMO_DIR / "rotors_slopes.csv").exists():
        return fail(f"demo data not found in {DEMO_DIR} (run scripts/make_demo_data.py)")
    base = output_folder(args, "signfree-demo")
    reference = read_reference(DEMO_DIR / "rotors_exact.csv")
    print("signfree demo: 63 independent planar rotors (coupling b = 1) in an imaginary field;\n"
          "the exact phase factor (I0(sqrt(b^2 - mu^2)) / I0(b))^63 is printed beside the answer.\n")
    outputs = {}
    with ProgressLine(len(RUNS), getattr(args, "quiet", False)) as line:
        for name, spec in RUNS:
            ns = argparse.Namespace(mu=spec, volume=None, kind=None, symmetry=None,
                                    model="chebyshev", degree=None, digits=12, certify=False,
                                    errors="auto", bootstrap=200, seed=None)
            outputs[Path(name).stem] = run_files(DEMO_DIR / name, ns)
            line.file_done()
    files = {f"{stem}/{fname}": data for stem, (_, out) in outputs.items()
             for fname, data in out.items()}
    write_files(base, files, force=args.force)
    for stem, (result, _) in outputs.items():
        print_report(result, base / stem, reference)
        print()
    return 0
