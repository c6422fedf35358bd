"""The ``signfree`` command: a thin layer over the Python API, one module per
command.

    signfree run INPUT [INPUT ...] --mu SPEC [options]
    signfree demo [--out DIR] [--force]
    signfree zeros INPUT --box RE0:RE1,IM0:IM1 [options]
    signfree compare INPUT --mu SPEC [options]
    signfree report INPUT --mu SPEC [--reference FILE] [options]
    signfree volumes INPUT INPUT [INPUT ...] --mu SPEC [--volumes V1,V2,...] [options]
    signfree sweep MANIFEST --mu SPEC [--jobs N | --scheduler ADDRESS] [options]

A command module only parses its options, calls the API and writes. Only the
module of the command named on the command line is imported (matplotlib
alone costs about a second of start-up). Every user mistake gives one line
on stderr and exit status 2, Ctrl-C gives one line and exit status 130, and
in both cases nothing is written.
"""
import argparse
import importlib
import os
import sys

# The least-squares problems of a run are small: a BLAS thread pool only spins
# idle on them (and costs most on a busy machine). Set before numpy loads; a
# user's own setting wins.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

from signfree.cli.options import EXIT_INTERRUPTED, Parser, fail  # noqa: E402  (after BLAS)

# command -> (module, help text shown by ``signfree --help``)
COMMANDS = {
    "run": ("signfree.cli.run", "analyse density or sample files"),
    "demo": ("signfree.cli.demo", "run the pipeline on the shipped demo data"),
    "zeros": ("signfree.cli.zeros", "zeros of Z(mu) in a box of the complex mu plane"),
    "compare": ("signfree.cli.compare", "Chebyshev, cumulant and piecewise routes side by side"),
    "report": ("signfree.cli.report", "analysis with figures and an offline HTML report"),
    "volumes": ("signfree.cli.volumes", "several volumes to the infinite-volume limit"),
    "sweep": ("signfree.cli.sweep", "many ensembles from a manifest, locally or on a cluster"),
}
EPILOG = """\
inputs:   text (comma-, semicolon- or whitespace-separated), .npy/.npz, FILE.h5:/group/dataset
kinds:    slopes (d ln rho/dq per interval), log_density (ln rho on a grid),
          histogram (counts per bin), samples (a time series of q)
models:   chebyshev (default), piecewise, cumulant (--order K)
exit:     0 done, 2 bad input or option (one line on stderr), 130 interrupted

'signfree COMMAND --help' lists the options of a command; 'signfree demo' runs the
shipped example."""
# options whose value may start with a minus sign (--mu -1:1:5, --box -3:3,-1:1)
SIGNED_VALUES = ("--mu", "--box", "--zeros")


def build_parser(argv=None):
    """The argument parser, with the full options of the command named in
    ``argv`` (default: sys.argv) and a placeholder for every other one."""
    parser = Parser(prog="signfree", description="Phase factors and free-energy "
                    "differences from a measured density of states.", epilog=EPILOG,
                    formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest="command", required=True, parser_class=Parser)
    argv = sys.argv[1:] if argv is None else argv
    wanted = next((a for a in argv if not a.startswith("-")), None)
    for name, (module, text) in COMMANDS.items():
        if name == wanted:
            importlib.import_module(module).add_parser(sub)
        else:
            sub.add_parser(name, help=text, add_help=False)
    return parser


def join_signed_values(argv):
    """``--mu -1:1:5`` as ``--mu=-1:1:5`` (argparse would take the value for
    an option): a value of --mu or --box that starts with one minus sign is
    joined to its option."""
    out, i = [], 0
    while i < len(argv):
        a = argv[i]
        if a in SIGNED_VALUES and i + 1 < len(argv) and argv[i + 1].startswith("-") \
                and not argv[i + 1].startswith("--") and argv[i + 1] != "-h":
            out.append(f"{a}={argv[i + 1]}")
            i += 2
            continue
        out.append(a)
        i += 1
    return out


def main(argv=None):
    """Run one command; returns its exit status (0, 2 for bad input or an
    output that cannot be written, 130 when interrupted)."""
    from signfree.errors import InputError
    argv = join_signed_values(list(sys.argv[1:] if argv is None else argv))
    try:
        args = build_parser(argv).parse_args(argv)
        return args.handler(args)
    except KeyboardInterrupt:
        sys.stderr.write("signfree: interrupted; nothing written\n")
        return EXIT_INTERRUPTED
    except (InputError, ValueError) as exc:
        return fail(str(exc))
    except BrokenPipeError:
        # the reader of the printed table went away (signfree run ... | head);
        # the files are already written
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
