"""The values of mu a run is asked for, written as text.

    0.1,0.5,1          a comma list
    0:2:41             start:stop:count, count evenly spaced values, both ends included
    0:2pi:61, pi/2     multiples of pi (theta terms): 2pi, 2*pi, 3pi/4, -pi
    0.5i, 0:1i:11      imaginary mu = i nu (no cancellation: Z(i nu)/Z(0) is a
    0.3+0.2i           Laplace transform), and complex mu

A value is a sum of terms; a term is a product of decimal numbers, ``pi``
and ``i`` (``*`` may be left out), optionally divided by decimal numbers.
Decimals are kept exact (the fractions of the decimals written). pi is
replaced by a rational within 1e-1040 of it, so a value written with pi
differs from the true multiple far below any digit signfree can be asked
for (at most 1000).

Real values come back as :class:`fractions.Fraction` (as they always have);
a value with a non-zero imaginary part as a :class:`ComplexMu` of two
Fractions.
"""
import re
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache

import mpmath

PI_DIGITS = 1050
_TOKEN = re.compile(r"\s*(?:(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)|(?P<pi>pi)"
                    r"|(?P<i>i)|(?P<op>[*/+\-]))")


@dataclass(frozen=True)
class ComplexMu:
    """A mu off the real axis, real + i imag, both exact fractions."""

    real: Fraction
    imag: Fraction

    def __complex__(self):
        return complex(float(self.real), float(self.imag))

    def __str__(self):
        im = _short(abs(self.imag))
        im = ("" if im == "1" else im) + "i"
        if self.real == 0:
            return ("-" if self.imag < 0 else "") + im
        return f"{_short(self.real)}{'-' if self.imag < 0 else '+'}{im}"


def _short(x):
    """A Fraction as a decimal of at most 15 significant digits."""
    s = mpmath.nstr(mpmath.mpf(x.numerator) / x.denominator, 15)
    return s[:-2] if s.endswith(".0") else s


@lru_cache(maxsize=1)
def pi_fraction():
    """pi as a Fraction, good to PI_DIGITS significant digits (mpmath)."""
    with mpmath.workdps(PI_DIGITS + 10):
        sign, man, exp, _ = (+mpmath.pi)._mpf_
    return Fraction(int(man)) * Fraction(2) ** int(exp)


def _tokens(text):
    out, pos = [], 0
    text = text.strip()
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None or m.end() == pos:
            raise ValueError(f"cannot read {text[pos:]!r}")
        kind = m.lastgroup
        out.append((kind, m.group(kind)))
        pos = m.end()
    return out


def parse_value(text):
    """One value: a Fraction (real) or a ComplexMu. Raises ValueError."""
    toks = _tokens(text)
    if not toks:
        raise ValueError("empty value")
    re_part, im_part = Fraction(0), Fraction(0)
    k = 0
    first = True
    while k < len(toks):
        sign = 1
        if toks[k] == ("op", "+") or toks[k] == ("op", "-"):
            sign = -1 if toks[k][1] == "-" else 1
            k += 1
        elif not first:
            raise ValueError("expected + or - between terms")
        coef, n_pi, n_i, k = _term(toks, k)
        first = False
        value = sign * coef * (pi_fraction() if n_pi else 1)
        if n_i:
            im_part += value
        else:
            re_part += value
    if im_part == 0:
        return re_part
    return ComplexMu(re_part, im_part)


def _term(toks, k):
    """(coefficient, pi count, i count, next index) of one product term."""
    coef, n_pi, n_i, factors = Fraction(1), 0, 0, 0
    while k < len(toks):
        kind, text = toks[k]
        if kind == "op" and text in "+-":
            break
        if kind == "op" and text == "*":
            if factors == 0 or k + 1 >= len(toks) or toks[k + 1][0] == "op":
                raise ValueError("'*' needs a factor on both sides")
            k += 1
            continue
        if kind == "op" and text == "/":
            if factors == 0 or k + 1 >= len(toks) or toks[k + 1][0] != "num":
                raise ValueError("'/' must be followed by a number")
            d = Fraction(toks[k + 1][1])
            if d == 0:
                raise ValueError("division by zero")
            coef /= d
            k += 2
            continue
        if kind == "num":
            if k > 0 and toks[k - 1][0] == "num":
                raise ValueError("two numbers in a row")
            coef *= Fraction(text)
        elif kind == "pi":
            n_pi += 1
        else:
            n_i += 1
        factors += 1
        k += 1
    if factors == 0:
        raise ValueError("a term is missing")
    if n_pi > 1 or n_i > 1:
        raise ValueError("pi and i may appear at most once per term")
    return coef, n_pi, n_i, k


def parse_mu_values(spec):
    """The values of a mu spec (module docstring), in the order written: a
    comma list whose items are values or start:stop:count ranges."""
    values = []
    for item in spec.split(","):
        values.extend(_range(item) if ":" in item else [parse_value(item)])
    return values


def _range(item):
    parts = item.split(":")
    if len(parts) != 3:
        raise ValueError("a range is start:stop:count")
    start, stop = parse_value(parts[0]), parse_value(parts[1])
    if not re.fullmatch(r"\s*\d+\s*", parts[2]):
        raise ValueError(f"the count {parts[2].strip()!r} of a range is not a whole number")
    count = int(parts[2])
    if count < 1 or (count == 1 and start != stop):
        raise ValueError("count must be at least 2 (or 1 with start = stop)")
    if count == 1:
        return [start]
    if isinstance(start, Fraction) and isinstance(stop, Fraction):
        h = (stop - start) / (count - 1)
        return [start + k * h for k in range(count)]
    (r0, i0), (r1, i1) = _pair(start), _pair(stop)
    hr, hi = (r1 - r0) / (count - 1), (i1 - i0) / (count - 1)
    return [_value(r0 + k * hr, i0 + k * hi) for k in range(count)]


def _pair(v):
    return (v.real, v.imag) if isinstance(v, ComplexMu) else (v, Fraction(0))


def _value(re_part, im_part):
    return re_part if im_part == 0 else ComplexMu(re_part, im_part)


def split_real(mus):
    """(indices and values of the real mu, indices and values of the others)."""
    real = [(k, m) for k, m in enumerate(mus) if not isinstance(m, ComplexMu)]
    other = [(k, m) for k, m in enumerate(mus) if isinstance(m, ComplexMu)]
    return real, other
