"""What an analysis is asked to do, as one immutable value shared by the
analysis paths and the command line, and the mu list it runs over.

    settings = Settings(digits=20, errors="bootstrap", seed=7)
    result = analyse(density, parse_mu_spec("0:3:61"), settings)

A new option is a new field here (with its check in ``__post_init__``); the
command line fills the fields of the same names.
"""
from dataclasses import dataclass, fields, replace

from signfree.analysis.mu_spec import ComplexMu, parse_mu_values
from signfree.analysis.weights import parse_observables

MODELS = ("auto", "chebyshev", "rational", "two-component", "piecewise", "cumulant")
ERROR_METHODS = ("auto", "jackknife", "bootstrap", "covariance", "none")
PARITIES = ("even", "odd", "none")
LATTICE_ROUTES = ("auto", "direct", "smoothed")


@dataclass(frozen=True)
class Settings:
    """The choices of one analysis.

    model     'auto' (default: the Chebyshev series unless the data are
              two-phase or it fits at no degree, then the best of Chebyshev,
              rational and two-component; analysis.model_choice), 'chebyshev',
              'rational', 'two-component', 'piecewise' or 'cumulant'
    degree    Chebyshev degree: None (chosen from the errors), an integer, or
              'per-mu' (with model 'auto' a degree means the Chebyshev model)
    digits    significant digits wanted (1 to 1000)
    certify   rigorous acb.integral enclosures instead of the refinement check
    volume    V for Delta f = -ln|Z/Z0| / V (None: the density's own)
    parity    'even', 'odd', 'none' or None (the density's stated symmetry,
              else detection)
    errors    statistical error route, one of ERROR_METHODS
    bootstrap_samples, seed   bootstrap resamples and their seed (None: random,
              recorded)
    order     highest order of the cumulant expansion
    observables  names of the observables wanted at every mu: 'n', 'chi' and
              polynomials in q (analysis.weights); a comma list or a tuple
    imaginary_reference  measured <q>(nu) at imaginary mu = i nu to compare
              with (an io.references.ImaginaryReference), or None
    volume_order   order of the fit in 1/V of the infinite-volume limit:
              'auto' (chosen per mu from the errors) or a fixed power
    step      charge lattice: None (metadata, else detection), 'continuous'
              (the integral), or the lattice step as a positive Fraction
              (Z is then the periodic sum over the lattice points)
    lattice_route  for lattice charges: 'direct' (the measured P(Q)),
              'smoothed' (the Chebyshev model at the lattice points) or 'auto'
    complete_range  the data cover every value the charge can take (nothing
              lies beyond the range); None: the metadata 'range: complete'
    """

    model: str = "auto"
    degree: object = None
    digits: int = 12
    certify: bool = False
    volume: float = None
    parity: str = None
    errors: str = "auto"
    bootstrap_samples: int = 200
    seed: int = None
    order: int = 4
    observables: tuple = ()
    imaginary_reference: object = None
    volume_order: object = "auto"
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
        if not (self.volume_order == "auto" or (isinstance(self.volume_order, int)
                                                 and 0 <= self.volume_order <= 4)):
            raise ValueError(f"--volume-order {self.volume_order!r}: expected 'auto' or an "
                             "integer from 0 to 4")
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
        if isinstance(self.observables, str):
            items = tuple(s.strip() for s in self.observables.split(","))
            object.__setattr__(self, "observables", items)
        if self.observables:
            parse_observables(self.observables)
        if self.degree is not None and self.model not in ("chebyshev", "auto"):
            raise ValueError(f"--degree {self.degree}: the degree applies only to the "
                             f"Chebyshev model (which --model auto then takes), not to "
                             f"--model {self.model}")

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


def parse_mu_spec(spec, allow_complex=False):
    """'0.1,0.5,1' (a list) or 'start:stop:count' (count evenly spaced values,
    both ends included) as exact fractions of the decimals written; values
    may use pi ('0:2pi:61', 'pi/2'). With ``allow_complex``, imaginary and
    complex values ('0.5i', '0:1i:11', '0.3+0.2i') come back as
    :class:`~signfree.analysis.mu_spec.ComplexMu` (grammar in
    :mod:`signfree.analysis.mu_spec`)."""
    try:
        values = parse_mu_values(spec)
    except (ValueError, ZeroDivisionError) as exc:
        raise ValueError(f"--mu {spec.strip()!r}: {exc}; expected a comma list such as "
                         "0.1,0.5,1 or start:stop:count such as 0:2:41 (pi and i allowed, "
                         "e.g. 0:2pi:61 or 0:1i:11)") from None
    if not allow_complex and any(isinstance(v, ComplexMu) for v in values):
        raise ValueError(f"--mu {spec.strip()!r}: this command takes real mu only "
                         "(imaginary and complex mu are for run and report)")
    return values
