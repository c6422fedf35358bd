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


EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


def fail(message):
    """One line on stderr; returns the exit status for bad input (2)."""
    sys.stderr.write(f"signfree: {message}\n")
    return EXIT_BAD_INPUT


def handler(function):
    """A command's handler as the command line runs it: bad input or an
    output that cannot be written gives one line on stderr and exit status
    2, Ctrl-C one line and 130; in both cases nothing has been written
    (every command writes only after everything is computed)."""
    import functools

    from signfree.errors import InputError

    @functools.wraps(function)
    def run(*args, **kwargs):
        try:
            return function(*args, **kwargs)
        except KeyboardInterrupt:
            sys.stderr.write("signfree: interrupted; nothing written\n")
            return EXIT_INTERRUPTED
        except (InputError, ValueError) as exc:
            return fail(str(exc))
    return run


INPUT_HELP = ("input file: CSV or whitespace/semicolon-separated text, .npy/.npz, or an HDF5 "
              "dataset FILE.h5:/group/dataset (kind slopes, log_density, histogram or "
              "samples)")
MU_HELP = ("mu values: a comma list (0.1,0.5,1) or start:stop:count (count values, both "
           "ends included); multiples of pi and imaginary parts allowed (0:2pi:61, 0:1i:11, "
           "0.3+0.2i); a list starting with a minus sign may follow --mu directly")
KIND_HELP = ("input kind (overrides metadata): slopes (d ln rho/dq per interval), log_density "
             "(ln rho on a grid), histogram (counts per bin) or samples (a time series of q)")


def add_output_options(p, several=False):
    """--out and --force, shared by every command that writes."""
    p.add_argument("--out", metavar="DIR",
                   help="output folder (default: a new folder named after the command and "
                        "the time)" + ("; with several inputs one subfolder per input"
                                       if several else ""))
    p.add_argument("--force", action="store_true",
                   help="write into an --out folder that exists and is not empty, replacing "
                        "files of the same names")


def add_figure_options(p):
    """--theta: the symbol of the field on the figures' axes."""
    p.add_argument("--theta", action="store_true",
                   help="label the field theta instead of mu on the figures (a theta term)")


def figure_field(args):
    return "theta" if getattr(args, "theta", False) else "mu"


def output_folder(args, prefix):
    """The folder a command will write to, checked before anything is
    computed: --out, else a new ``prefix-<date>-<time>`` folder. Raises
    OutputError when --out names a file or a non-empty folder (without
    --force)."""
    from pathlib import Path

    from signfree.io.writing import check_output_folder, new_folder_name
    if getattr(args, "out", None):
        return check_output_folder(Path(args.out), getattr(args, "force", False))
    return new_folder_name(prefix)


def add_input_options(p, symmetry=True):
    """--kind (and --symmetry): how to read an input file, shared by every
    command that reads one."""
    p.add_argument("--kind", choices=("slopes", "log_density", "histogram", "samples"),
                   help=KIND_HELP)
    if symmetry:
        p.add_argument("--symmetry", choices=("even", "odd", "none"),
                       help="parity of ln rho (overrides metadata; default: detect)")


def add_analysis_options(p):
    p.add_argument("--mu", required=True, metavar="SPEC", help=MU_HELP)
    p.add_argument("--volume", type=float, help="volume V for delta_f (overrides metadata)")
    add_input_options(p)
    p.add_argument("--model", choices=MODELS, default="auto",
                   help="smoothing: auto (default: the Chebyshev series of ln rho, or for "
                        "two-phase data the best of it, the rational model of the slope and "
                        "two components by chi2 and AIC), chebyshev, rational, two-component, "
                        "the raw piecewise-linear reconstruction, or the cumulant expansion "
                        "to --order")
    p.add_argument("--order", type=int, metavar="K",
                   help="highest order of the cumulant expansion, with --model cumulant "
                        "(default 4)")
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
    p.add_argument("--observables", metavar="LIST",
                   help="also compute at every mu: n (charge density <q>/V), chi (its "
                        "susceptibility), polynomials in q such as q^2 (ratios <O>); a comma "
                        "list, e.g. n,chi,q^2")
    p.add_argument("--imaginary-reference", metavar="FILE",
                   help="CSV nu,value,error: <q>/V measured at imaginary mu = i nu, compared "
                        "with the prediction (chi^2)")
    p.add_argument("--covariance", action="store_true",
                   help="also write covariance.csv: the covariance of Z(mu_i)/Z(0) across "
                        "the scan from the resampled fits (needs replicas)")

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


def add_volume_options(p):
    """--volume-order: the fit in 1/V of the infinite-volume limit."""
    p.add_argument("--volume-order", type=_volume_order, default="auto", metavar="auto|P",
                   help="powers of 1/V fitted for the infinite-volume limit (default auto: "
                        "the smallest order consistent with the errors, per mu)")


def _volume_order(text):
    if text == "auto":
        return text
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected 'auto' or an integer, got {text!r}")


def _degree(text):
    if text == "per-mu":
        return text
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer or 'per-mu', got {text!r}")


def settings_from_args(args):
    """The :class:`Settings` of parsed options (options a command does not
    have keep their defaults)."""
    given = {
        "model": getattr(args, "model", None), "degree": getattr(args, "degree", None),
        "digits": getattr(args, "digits", None), "certify": getattr(args, "certify", None),
        "volume": getattr(args, "volume", None), "parity": getattr(args, "symmetry", None),
        "errors": getattr(args, "errors", None),
        "bootstrap_samples": getattr(args, "bootstrap", None), "seed": getattr(args, "seed", None),
        "order": getattr(args, "order", None),
        "observables": getattr(args, "observables", None),
        "imaginary_reference": _imaginary_reference(getattr(args, "imaginary_reference", None)),
        "volume_order": getattr(args, "volume_order", None),
        "step": getattr(args, "step", None),
        "lattice_route": getattr(args, "lattice_route", None),
        "complete_range": getattr(args, "complete_range", None),
    }
    if given["order"] is not None and given["model"] != "cumulant":
        raise ValueError(f"--order {given['order']}: the order of the cumulant expansion "
                         "applies only with --model cumulant")
    return Settings(**{k: v for k, v in given.items() if v is not None})


def _imaginary_reference(path):
    if path is None:
        return None
    from signfree.io.references import read_imaginary_reference
    return read_imaginary_reference(path)


def read_reference(path):
    """A CSV of mu,value (value as a decimal string) -> {Fraction(mu): mpf}."""
    import csv
    from fractions import Fraction

    import mpmath
    with open(path) as f:
        rows = [r for r in csv.reader(line for line in f if not line.startswith("#"))]
    return {Fraction(mu): mpmath.mpf(v) for mu, v in rows[1:]}

