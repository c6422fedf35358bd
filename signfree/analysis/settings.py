"""What an analysis is asked to do, as one immutable value shared by the
analysis paths and the command line, and the mu list it runs over.

    settings = Settings(digits=20, errors="bootstrap", seed=7)
    result = analyse(density, parse_mu_spec("0:3:61"), settings)

A new option is a new field here (with its check in ``__post_init__``); the
command line fills the fields of the same names.
"""
from dataclasses import dataclass, fields, replace
from fractions import Fraction

MODELS = ("chebyshev", "piecewise", "cumulant")
ERROR_METHODS = ("auto", "jackknife", "bootstrap", "covariance", "none")
PARITIES = ("even", "odd", "none")
LATTICE_ROUTES = ("auto", "direct", "smoothed")


@dataclass(frozen=True)
class Settings:
    """The choices of one analysis.

    model     'chebyshev' (default), 'piecewise' or 'cumulant'
    degree    Chebyshev degree: None (chosen from the errors), an integer, or
              'per-mu'
    digits    significant digits wanted (1 to 1000)
    certify   rigorous acb.integral enclosures instead of the refinement check
    volume    V for Delta f = -ln|Z/Z0| / V (None: the density's own)
    parity    'even', 'odd', 'none' or None (the density's stated symmetry,
              else detection)
    errors    statistical error route, one of ERROR_METHODS
    bootstrap_samples, seed   bootstrap resamples and their seed (None: random,
              recorded)
    order     highest order of the cumulant expansion
    step      charge lattice: None (metadata, else detection), 'continuous'
              (the integral), or the lattice step as a positive Fraction
              (Z is then the periodic sum over the lattice points)
    lattice_route  for lattice charges: 'direct' (the measured P(Q)),
              'smoothed' (the Chebyshev model at the lattice points) or 'auto'
    complete_range  the data cover every value the charge can take (nothing
              lies beyond the range); None: the metadata 'range: complete'
    """

    model: str = "chebyshev"
    degree: object = None
    digits: int = 12
    certify: bool = False
    volume: float = None
    parity: str = None
    errors: str = "auto"
    bootstrap_samples: int = 200
    seed: int = None
    order: int = 4
    step: object = None
    lattice_route: str = "auto"
    complete_range: bool = None

    def __post_init__(self):
        if self.model not in MODELS:
            raise ValueError(f"unknown model {self.model!r}; expected one of {', '.join(MODELS)}")
        check_digits(self.digits)
        if self.errors not in ERROR_METHODS:
            raise ValueError(f"--errors {self.errors!r}: expected one of "
                             f"{', '.join(ERROR_METHODS)}")
        if self.parity is not None and self.parity not in PARITIES:
            raise ValueError(f"--symmetry {self.parity!r}: expected one of {', '.join(PARITIES)}")
        if self.volume is not None and not self.volume > 0:
            raise ValueError(f"--volume {self.volume}: expected a positive number")
        if self.bootstrap_samples < 2:
            raise ValueError(f"--bootstrap {self.bootstrap_samples}: expected at least 2 "
                             "resamples")
        if self.order < 1:
            raise ValueError(f"--order {self.order}: expected at least 1")
        if self.step is not None:
            from signfree.models.lattice import parse_step
            try:
                object.__setattr__(self, "step", parse_step(self.step))
            except ValueError as exc:
                raise ValueError(f"--{exc}") from None
        if self.lattice_route not in LATTICE_ROUTES:
            raise ValueError(f"--lattice-route {self.lattice_route!r}: expected one of "
                             f"{', '.join(LATTICE_ROUTES)}")
        if not (self.degree is None or self.degree == "per-mu" or isinstance(self.degree, int)):
            raise ValueError(f"--degree {self.degree!r}: expected an integer or 'per-mu'")

    def with_(self, **changes):
        """A copy with some fields changed (checked again)."""
        return replace(self, **changes)

    @classmethod
    def names(cls):
        return tuple(f.name for f in fields(cls))


def settings_of(settings=None, **changes):
    """``settings`` (default: the defaults) with keyword changes applied."""
    base = settings if settings is not None else Settings()
    return replace(base, **changes) if changes else base


def check_digits(digits):
    """The --digits range every command accepts (1 to 1000)."""
    if digits < 1 or digits > 1000:
        raise ValueError(f"--digits {digits}: expected 1 to 1000")
    return digits


def parse_mu_spec(spec):
    """'0.1,0.5,1' (a list) or 'start:stop:count' (count evenly spaced values,
    both ends included) as exact fractions of the decimals written."""
    spec = spec.strip()
    try:
        if ":" in spec:
            parts = spec.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop = Fraction(parts[0].strip()), Fraction(parts[1].strip())
            count = int(parts[2].strip())
            if count < 1 or (count == 1 and start != stop):
                raise ValueError
            if count == 1:
                return [start]
            h = (stop - start) / (count - 1)
            return [start + k * h for k in range(count)]
        values = [Fraction(s.strip()) for s in spec.split(",")]
        if not values:
            raise ValueError
        return values
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"--mu {spec!r}: expected a comma list such as 0.1,0.5,1 "
                         "or start:stop:count such as 0:2:41") from None
