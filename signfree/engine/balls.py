"""Ball-arithmetic helpers shared by every engine module: conversions between
Arb balls (python-flint; Johansson, IEEE Trans. Computers 2017) and mpmath
numbers, exact differences, mu lists as exact fractions, and the working
precision rule (cancellation depth + wanted digits + a guard).

Every Arb operation rounds to the context precision, 53 bits outside a
``ctx.workprec`` block, negation and subtraction included: arithmetic on
balls happens inside a precision block or through :func:`difference`.
"""
import math
from fractions import Fraction

import mpmath
import numpy as np
from flint import acb, arb, ctx, fmpq, fmpz

GUARD_DIGITS = 10
MAX_PREC = 1 << 15          # bits (about 9900 digits)
MAX_NODES = 8000
LOG2_10 = math.log2(10.0)

def to_mpf(x):
    """An arb midpoint as an mpmath mpf (exact; any exponent)."""
    man, exp = x.mid().man_exp()
    return mpmath.mpf((int(man), int(exp)))


def upper(x):
    """An upper bound of |x| for an arb or acb ball, as an mpmath mpf."""
    if isinstance(x, acb):
        return upper(x.real.abs_upper()) + upper(x.imag.abs_upper())
    man, exp = x.abs_upper().man_exp()
    return mpmath.mpf((int(man), int(exp)))


def difference(a, b):
    """a - b for arb or acb balls, exactly (Arb rounds every operation to the
    context precision, 53 bits outside a ``workprec`` block)."""
    with ctx.workprec(MAX_PREC):
        return a - b


def abs_mid(z):
    """|mid z| of an acb ball as an mpf."""
    return mpmath.hypot(to_mpf(z.real), to_mpf(z.imag))


def as_fractions(mus):
    """mu values as exact fractions. Floats that are evenly spaced to within
    a few units in the last place (as from numpy.linspace) are snapped onto the
    exact grid, which lets the engine factorise exp(i mu q); the snap moves a
    mu by at most 4 ulp."""
    out = [m if isinstance(m, Fraction) else Fraction(float(m)) for m in mus]
    if len(out) >= 3 and uniform_step(out) is None:
        h = (out[-1] - out[0]) / (len(out) - 1)
        grid = [out[0] + k * h for k in range(len(out))]
        scale = max(abs(float(m)) for m in out) or 1.0
        if h != 0 and all(abs(float(g - m)) <= 4 * np.spacing(scale) for g, m in zip(grid, out)):
            return grid
    return out


def uniform_step(mus):
    """The step h if mus are evenly spaced (exactly, as fractions), else None."""
    if len(mus) < 3:
        return None
    h = mus[1] - mus[0]
    if h == 0 or any(mus[i + 1] - mus[i] != h for i in range(len(mus) - 1)):
        return None
    return h



def precision_bits(depth, digits, magnitude=1.0, nodes=64):
    """Working precision for a cancellation depth (decimal orders), wanted
    digits, the size of the exponent p and the number of summed terms."""
    bits = (max(depth, 0.0) + digits + GUARD_DIGITS) * LOG2_10
    bits += math.log2(abs(magnitude) + 2.0) + math.log2(nodes + 1.0) + 16
    return int(min(MAX_PREC, math.ceil(bits / 64.0) * 64))


def arb_of(x):
    """An exact rational (Fraction) or float as an arb at the current precision."""
    if isinstance(x, Fraction):
        return arb(fmpq(x.numerator, x.denominator))
    return arb(x)


def exp_i(theta):
    return acb(0, theta).exp()



def relative_radius(z):
    mag = abs_mid(z)
    rad = upper(acb(z.real.rad(), z.imag.rad()))
    return mpmath.inf if mag == 0 else rad / mag




def mpf_to_arb(x):
    """An mpf, float or int as an arb, exactly when the precision allows."""
    if isinstance(x, (int, np.integer)):
        return arb(fmpz(int(x)))
    x = mpmath.mpf(x)
    if x == 0:
        return arb(0)
    if not mpmath.isfinite(x):
        raise ValueError(f"non-finite value {x}")
    sign, man, exp, _ = x._mpf_
    man, exp = (-int(man) if sign else int(man)), int(exp)
    if exp >= 0:
        return arb(fmpz(man << exp))
    return arb(fmpq(man, 1 << (-exp)))
