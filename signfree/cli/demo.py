"""``signfree demo``: the pipeline on the shipped demo data (independent
planar rotors), with the exact phase factor printed beside the answer."""
import argparse
from pathlib import Path

from signfree.cli.options import fail, read_reference
from signfree.cli.run import run_files
from signfree.report.outputs import print_report

HELP = "run the pipeline on the shipped demo data"
DEMO_DIR = Path(__file__).resolve().parent.parent.parent / "data" / "demo"


def add_parser(sub):
    demo = sub.add_parser("demo", help=HELP)
    demo.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    demo.set_defaults(handler=cmd_demo)
    return demo


def cmd_demo(args):
    from signfree.io.writing import new_folder_name, write_files
    if not (DEMO_DIR / "rotors_slopes.csv").exists():
        return fail(f"demo data not found in {DEMO_DIR} (run scripts/make_demo_data.py)")
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
        print_report(result, folder, reference)
        print()
    return 0

