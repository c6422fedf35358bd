"""Options shared by the commands, and the one-line failure every command
uses. The analysis options fill the fields of
:class:`signfree.analysis.settings.Settings` of the same names."""
import argparse
import sys

from signfree.analysis.settings import ERROR_METHODS, LATTICE_ROUTES, MODELS, Settings


class Parser(argparse.ArgumentParser):
    """argparse with one line on stderr and exit status 2 for a bad option."""

    def error(self, message):
        sys.stderr.write(f"{self.prog}: {message}\n")
        sys.exit(2)


def fail(message):
    """One line on stderr; returns the exit status for bad input (2)."""
    sys.stderr.write(f"signfree: {message}\n")
    return 2


def add_input_options(p, symmetry=True):
    """--kind (and --symmetry): how to read an input file, shared by every
    command that reads one."""
    p.add_argument("--kind", choices=("slopes", "log_density", "histogram", "samples"),
                   help="input kind (overrides metadata)")
    if symmetry:
        p.add_argument("--symmetry", choices=("even", "odd", "none"),
                       help="parity of ln rho (overrides metadata; default: detect)")




def add_analysis_options(p):
    p.add_argument("--mu", required=True, metavar="SPEC",
                   help="mu values: a comma list (0.1,0.5,1) or start:stop:count")
    p.add_argument("--volume", type=float, help="volume V for delta_f (overrides metadata)")
    add_input_options(p)
    p.add_argument("--model", choices=MODELS, default="chebyshev",
                   help="smoothing: Chebyshev series of ln rho (default), the raw piecewise-"
                        "linear reconstruction, or the cumulant expansion to --order")
    p.add_argument("--order", type=int, default=4, metavar="K",
                   help="order of the cumulant expansion (default 4)")
    p.add_argument("--degree", type=_degree, metavar="N|per-mu",
                   help="Chebyshev degree (default: chosen from the errors); 'per-mu' picks "
                        "per mu the candidate with the smallest statistical plus model error")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted (default 12)")
    p.add_argument("--errors", default="auto",
                   choices=ERROR_METHODS,
                   help="statistical errors (default: jackknife over replicas, else "
                        "covariance propagation of per-point errors)")
    p.add_argument("--bootstrap", type=int, default=200, metavar="B",
                   help="bootstrap resamples (default 200)")
    p.add_argument("--seed", type=int, help="bootstrap seed (default: random, recorded)")
    p.add_argument("--certify", action="store_true",
                   help="rigorous enclosures by acb.integral per point (slower)")
    add_lattice_options(p)


def add_lattice_options(p):
    """--step, --lattice-route, --complete-range: charges on a lattice."""
    p.add_argument("--step", metavar="S|integer|continuous",
                   help="the charge takes only the values of a lattice of step S (Z is then "
                        "the periodic sum over them); 'continuous' integrates (default: "
                        "metadata, else detection)")
    p.add_argument("--lattice-route", choices=LATTICE_ROUTES, default="auto",
                   help="for lattice charges: sum the measured P(Q) (direct), the smoothed "
                        "model at the lattice points (smoothed), or choose (auto)")
    p.add_argument("--complete-range", action="store_true", default=None,
                   help="the data cover every value the charge can take: nothing lies "
                        "beyond the range (a finite system's magnetisation)")


def _degree(text):
    if text == "per-mu":
        return text
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer or 'per-mu', got {text!r}")


# subcommands whose modules are imported only when they are asked for
# (matplotlib alone costs about a second of start-up)
LAZY = {
    "zeros": ("signfree.zeros", "add_zeros_parser",
              "zeros of Z(mu) in a box of the complex mu plane"),
    "compare": ("signfree.compare", "add_compare_parser",
                "Chebyshev, cumulant and piecewise routes side by side"),
    "report": ("signfree.report", "add_report_parser",
               "analysis with figures and an offline HTML report"),
}



def settings_from_args(args):
    """The :class:`Settings` of parsed options (options a command does not
    have keep their defaults)."""
    given = {
        "model": getattr(args, "model", None), "degree": getattr(args, "degree", None),
        "digits": getattr(args, "digits", None), "certify": getattr(args, "certify", None),
        "volume": getattr(args, "volume", None), "parity": getattr(args, "symmetry", None),
        "errors": getattr(args, "errors", None),
        "bootstrap_samples": getattr(args, "bootstrap", None), "seed": getattr(args, "seed", None),
        "order": getattr(args, "order", None), "step": getattr(args, "step", None),
        "lattice_route": getattr(args, "lattice_route", None),
        "complete_range": getattr(args, "complete_range", None),
    }
    return Settings(**{k: v for k, v in given.items() if v is not None})


def read_reference(path):
    """A CSV of mu,value (value as a decimal string) -> {Fraction(mu): mpf}."""
    import csv
    from fractions import Fraction

    import mpmath
    with open(path) as f:
        rows = [r for r in csv.reader(line for line in f if not line.startswith("#"))]
    return {Fraction(mu): mpmath.mpf(v) for mu, v in rows[1:]}

