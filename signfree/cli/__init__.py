"""The ``signfree`` command: a thin layer over the Python API, one module per
command.

    signfree run INPUT [INPUT ...] --mu SPEC [options]
    signfree demo [--out DIR]
    signfree zeros INPUT --box RE0:RE1,IM0:IM1 [options]
    signfree compare INPUT --mu SPEC [options]
    signfree report INPUT --mu SPEC [--reference FILE] [options]

A command module only parses its options, calls the API and writes. Only the
module of the command named on the command line is imported (matplotlib
alone costs about a second of start-up). Bad input gives one line on stderr,
exit status 2, and nothing is written.
"""
import importlib
import os
import sys

# The least-squares problems of a run are small: a BLAS thread pool only spins
# idle on them (and costs most on a busy machine). Set before numpy loads; a
# user's own setting wins.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

from signfree.cli.options import Parser  # noqa: E402  (after the BLAS setting)

# command -> (module, help text shown by ``signfree --help``)
COMMANDS = {
    "run": ("signfree.cli.run", "analyse density files"),
    "demo": ("signfree.cli.demo", "run the pipeline on the shipped demo data"),
    "zeros": ("signfree.cli.zeros", "zeros of Z(mu) in a box of the complex mu plane"),
    "compare": ("signfree.cli.compare", "Chebyshev, cumulant and piecewise routes side by side"),
    "report": ("signfree.cli.report", "analysis with figures and an offline HTML report"),
}


def build_parser(argv=None):
    """The argument parser, with the full options of the command named in
    ``argv`` (default: sys.argv) and a placeholder for every other one."""
    parser = Parser(prog="signfree", description="Phase factors and free-energy "
                    "differences from a measured density of states.")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=Parser)
    argv = sys.argv[1:] if argv is None else argv
    wanted = next((a for a in argv if not a.startswith("-")), None)
    for name, (module, text) in COMMANDS.items():
        if name == wanted:
            importlib.import_module(module).add_parser(sub)
        else:
            sub.add_parser(name, help=text, add_help=False)
    return parser


def main(argv=None):
    args = build_parser(argv).parse_args(argv)
    return args.handler(args)
