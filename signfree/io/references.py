"""Reading measurements at imaginary mu to compare the smoothing with.

At imaginary mu = i nu the weight rho(q) e^{-nu q} is positive, so an
ordinary simulation measures <q>(nu) there directly; agreement with the
analytic continuation of the smoothed density is the standard consistency
check. File format (CSV, ``#`` comments and ``# key: value`` metadata
before the header as for densities):

    # quantity: n
    nu,value,error
    0.1,-0.123,0.004

``nu`` the imaginary part of mu, ``value`` the measured charge density in
the units of the ``n`` column of results.csv (<q>/V when the volume is
known, else <q>), ``error`` its standard error (> 0). Rows are independent
measurements; a nu may not repeat.
"""
import math
import re
from dataclasses import dataclass, field
from fractions import Fraction

from signfree.errors import InputError

REQUIRED = ("nu", "value", "error")
_META = re.compile(r"#\s*([A-Za-z0-9_.\-]+)\s*:(.*)$")


@dataclass(frozen=True)
class ImaginaryReference:
    """Measured <q>(nu) / V at mu = i nu, sorted by nu: ``nu`` exact
    fractions of the decimals written, ``value`` and ``error`` floats."""

    nu: tuple
    value: tuple
    error: tuple
    source: str = "<memory>"
    metadata: dict = field(default_factory=dict, hash=False, compare=False)


def read_imaginary_reference(path):
    """Read a reference file (module docstring); raises InputError naming
    file, line and column."""
    src = str(path)
    try:
        with open(path, encoding="utf-8-sig") as f:
            lines = f.read().split("\n")
    except FileNotFoundError:
        raise InputError(src, "file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(src, f"cannot read file: {getattr(exc, 'strerror', None) or exc}") \
            from None
    meta, header, rows = {}, None, []
    for no, raw in enumerate(lines, 1):
        text = raw.strip()
        if not text:
            continue
        if text.startswith("#"):
            m = _META.match(text) if header is None else None
            if m:
                meta[m.group(1).lower()] = m.group(2).strip()
            continue
        fields = [s.strip() for s in text.split(",")]
        if header is None:
            header = (no, fields)
        else:
            rows.append((no, fields))
    if header is None:
        raise InputError(src, "empty file: no header line")
    hno, names = header
    missing = [c for c in REQUIRED if c not in names]
    if missing:
        raise InputError(src, "missing column(s) " + ", ".join(map(repr, missing))
                         + " (a reference at imaginary mu has the header nu,value,error)", hno)
    if not rows:
        raise InputError(src, "no data rows")
    col = {c: names.index(c) for c in REQUIRED}
    out, seen = [], {}
    for no, fields in rows:
        if len(fields) != len(names):
            raise InputError(src, f"expected {len(names)} fields as in the header, "
                             f"found {len(fields)}", no)
        nu = _number(src, no, col["nu"], "nu", fields[col["nu"]], exact=True)
        value = _number(src, no, col["value"], "value", fields[col["value"]])
        error = _number(src, no, col["error"], "error", fields[col["error"]])
        if error <= 0:
            raise InputError(src, f"column 'error': must be > 0, got {fields[col['error']]}",
                             no, col["error"] + 1)
        if nu in seen:
            raise InputError(src, f"column 'nu': nu = {fields[col['nu']]} repeated (first at "
                             f"line {seen[nu]})", no, col["nu"] + 1)
        seen[nu] = no
        out.append((nu, value, error))
    out.sort(key=lambda r: r[0])
    return ImaginaryReference(nu=tuple(r[0] for r in out), value=tuple(r[1] for r in out),
                              error=tuple(r[2] for r in out), source=src, metadata=meta)


def _number(src, line, j, name, text, exact=False):
    try:
        value = float(text)
    except ValueError:
        raise InputError(src, f"column '{name}': {text!r} is not a number", line, j + 1) \
            from None
    if not math.isfinite(value):
        raise InputError(src, f"column '{name}': {text!r} is not a finite number", line, j + 1)
    return Fraction(text) if exact else value
