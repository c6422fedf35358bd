"""Observables asked for by name, and the exact polynomial algebra behind them.

    parse_observables("n,chi,q^2,q^4-3q^2")

``n``    the charge density <q>_mu / V, with
         <q>_mu = Int q rho e^{i mu q} / Int rho e^{i mu q} = d ln Z / d(i mu)
``chi``  its susceptibility (<q^2>_mu - <q>_mu^2) / V = d^2 ln Z / d(i mu)^2 / V,
         the second cumulant of q under the complex weight (kappa_2 / V at mu = 0)
a polynomial O(q) in q, e.g. ``q^2``, ``2q^3 - q/2``: the ratio
         <O>_mu = Int O(q) rho e^{i mu q} / Int rho e^{i mu q}, in the column ``<O>``

Without a volume, ``n`` and ``chi`` are per system (V = 1).

The weights are turned into Chebyshev series in the window coordinate x of a
model (q = mid + half x) exactly, in rationals: x^n = 2^(1-n) sum' binom(n, j)
T_{n-2j}(x) (the primed sum halves the T_0 term; Mason & Handscomb, Chebyshev
Polynomials, 2003, eq. 2.14), and T_j T_k = (T_{j+k} + T_{|j-k|}) / 2.
"""
import re
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from math import comb

MAX_POWER = 12
_TOKEN = re.compile(r"\s*(?:(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)|(?P<q>q)"
                    r"|(?P<op>[*/+\-^]))")


@dataclass(frozen=True)
class Observable:
    """One observable: ``name`` (its column), ``kind`` ('n', 'chi' or
    'ratio') and, for a ratio, the power-series coefficients of O(q)."""

    name: str
    kind: str
    poly: tuple = ()

    @property
    def order(self):
        """The highest power of q whose moment it needs."""
        return {"n": 1, "chi": 2}.get(self.kind, len(self.poly) - 1)


def parse_observables(spec):
    """A comma list (or a sequence) of 'n', 'chi' and polynomials in q as a
    tuple of :class:`Observable`. Raises ValueError."""
    items = [s.strip() for s in spec.split(",")] if isinstance(spec, str) else \
        [str(s).strip() for s in spec]
    out, seen = [], set()
    for text in items:
        if text in ("n", "chi"):
            obs = Observable(text, text)
        else:
            try:
                poly = parse_polynomial(text)
            except ValueError as exc:
                raise ValueError(f"--observables {text!r}: {exc} (expected n, chi or a "
                                 "polynomial in q such as q^2 or q^4-3q^2)") from None
            obs = Observable(f"<{text.replace(' ', '')}>", "ratio", poly)
        if obs.name in seen:
            raise ValueError(f"--observables: {text!r} is asked for twice")
        seen.add(obs.name)
        out.append(obs)
    return tuple(out)


def parse_polynomial(text):
    """'2q^3 - q/2 + 1' -> (1, -1/2, 0, 2) (exact Fractions, power series in q)."""
    toks, pos = [], 0
    text = text.strip()
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None or m.end() == pos:
            raise ValueError(f"cannot read {text[pos:]!r}")
        toks.append((m.lastgroup, m.group(m.lastgroup)))
        pos = m.end()
    if not toks:
        raise ValueError("empty")
    coef = {}
    k, first = 0, True
    while k < len(toks):
        sign = 1
        if toks[k][0] == "op" and toks[k][1] in "+-":
            sign = -1 if toks[k][1] == "-" else 1
            k += 1
        elif not first:
            raise ValueError("expected + or - between terms")
        first = False
        c, power, k = _monomial(toks, k)
        coef[power] = coef.get(power, Fraction(0)) + sign * c
    top = max(coef)
    poly = tuple(coef.get(n, Fraction(0)) for n in range(top + 1))
    while len(poly) > 1 and poly[-1] == 0:
        poly = poly[:-1]
    if all(c == 0 for c in poly):
        raise ValueError("the polynomial is zero")
    return poly


def _monomial(toks, k):
    c, power, factors = Fraction(1), 0, 0
    while k < len(toks):
        kind, text = toks[k]
        nxt = toks[k + 1] if k + 1 < len(toks) else (None, None)
        if kind == "op" and text in "+-":
            break
        if kind == "op" and text == "*":
            if factors == 0 or nxt[0] not in ("num", "q"):
                raise ValueError("'*' needs a factor on both sides")
            k += 1
            continue
        if kind == "op" and text == "/":
            if factors == 0 or nxt[0] != "num" or Fraction(nxt[1]) == 0:
                raise ValueError("'/' must be followed by a non-zero number")
            c /= Fraction(nxt[1])
            k += 2
            continue
        if kind == "op" and text == "^":
            raise ValueError("'^' must follow q")
        if kind == "num":
            if k > 0 and toks[k - 1][0] == "num":
                raise ValueError("two numbers in a row")
            c *= Fraction(text)
            k += 1
        else:
            n = 1
            if nxt == ("op", "^"):
                if k + 2 >= len(toks) or toks[k + 2][0] != "num" or \
                        not re.fullmatch(r"\d+", toks[k + 2][1]):
                    raise ValueError("'^' must be followed by a whole number")
                n = int(toks[k + 2][1])
                k += 3
            else:
                k += 1
            power += n
        factors += 1
    if factors == 0:
        raise ValueError("a term is missing")
    if power > MAX_POWER:
        raise ValueError(f"powers of q above {MAX_POWER} are not supported")
    return c, power, k


def power_in_chebyshev(n):
    """x^n = sum_k a_k T_k(x), exact (module docstring)."""
    out = [Fraction(0)] * (n + 1)
    if n == 0:
        out[0] = Fraction(1)
        return out
    for j in range(n // 2 + 1):
        k = n - 2 * j
        c = Fraction(comb(n, j), 2 ** (n - 1))
        out[k] += c / 2 if k == 0 else c
    return out


@lru_cache(maxsize=512)
def in_window(poly, domain):
    """O(q) = sum_n poly[n] q^n as exact Chebyshev coefficients in the window
    coordinate x of ``domain`` = (a, b), q = mid + half x."""
    a, b = Fraction(domain[0]), Fraction(domain[1])
    mid, half = (a + b) / 2, (b - a) / 2
    out = [Fraction(0)] * max(1, len(poly))
    for n, o in enumerate(poly):
        if o == 0:
            continue
        for i in range(n + 1):
            c = Fraction(o) * comb(n, i) * mid ** (n - i) * half ** i
            for k, t in enumerate(power_in_chebyshev(i)):
                out[k] += c * t
    return tuple(out)


def chebyshev_product(u, v):
    """(sum u_j T_j)(sum v_k T_k) as Chebyshev coefficients."""
    out = [Fraction(0)] * (len(u) + len(v) - 1)
    for j, a in enumerate(u):
        if a == 0:
            continue
        for k, b in enumerate(v):
            if b == 0:
                continue
            out[j + k] += Fraction(a) * b / 2
            out[abs(j - k)] += Fraction(a) * b / 2
    return out


def evaluate(poly, q):
    """O(q) for a float q (Horner)."""
    out = 0.0
    for c in reversed(poly):
        out = out * q + float(c)
    return out
