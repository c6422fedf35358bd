"""Charges on a lattice: the topological charge under a theta term, the
magnetisation of an Ising-type model in an imaginary field (step 2), a
particle number. For them

    Z(theta)/Z(0) = sum_j P(Q_j) exp(i theta Q_j) / sum_j P(Q_j),
    Q_j = start + step * j,

is a periodic sum (period 2 pi / step), not an integral: the integral of a
smooth interpolation of P misses the aliased terms of the Poisson summation
formula (DLMF 1.8(iv)), sum_j f(Q_j) = (1/step) sum_k F(2 pi k / step).

Two models feed the exact sum (:mod:`signfree.engine.sums`):
  smoothed  ln P fitted by a Chebyshev series as for a continuous density
            (histograms as counts per lattice point, slopes as the finite
            differences ln P(Q + s) - ln P(Q) over intervals [Q, Q + s]) and
            evaluated at the lattice points;
  direct    the measured P(Q_j) themselves: counts, exp of a measured ln P,
            or ln P summed from slopes of width s.
Both are immutable values with the shared model interface
(:mod:`signfree.models`); their integrand form is 'lattice-sum'.
"""
import decimal
import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

LATTICE_RTOL = 1e-9          # a charge within this of a lattice point lies on it
CONTINUOUS = "continuous"


# ------------------------------------------------------------- the lattice

def parse_step(text):
    """A lattice step from an option or metadata value: a positive number
    ('2', '0.5', '1/3'), 'integer' (step 1) or 'continuous'. Raises
    ValueError with the accepted forms."""
    word = str(text).strip().lower()
    if word in ("integer", "int"):
        return Fraction(1)
    if word == CONTINUOUS:
        return CONTINUOUS
    try:
        step = Fraction(word)
    except (ValueError, ZeroDivisionError):
        step = None
    if step is None or step <= 0:
        raise ValueError(f"step {text!r}: expected a positive number such as 1, 2 or 1/3, "
                         "'integer' or 'continuous'")
    return step


@dataclass(frozen=True)
class Lattice:
    """The charges start + step * j, j = 0 .. count - 1, as exact fractions."""

    step: Fraction
    start: Fraction
    count: int

    @property
    def stop(self):
        return self.start + self.step * (self.count - 1)

    def points(self):
        return np.array([float(self.start + self.step * j) for j in range(self.count)])

    def charge(self, j):
        return self.start + self.step * j

    def index(self, q):
        """Lattice indices of the charges q (floats), or None for a charge that
        lies off the lattice."""
        k = (np.asarray(q, dtype=float) - float(self.start)) / float(self.step)
        r = np.rint(k)
        if np.any(np.abs(k - r) > LATTICE_RTOL * np.maximum(1.0, np.abs(k))):
            return None
        return r.astype(np.int64)

    def describe(self):
        return {"step": _text(self.step), "first": _text(self.start),
                "last": _text(self.stop), "points": self.count}


def _text(x):
    """An exact charge or step as text: '2', '-7/3', or 15 digits for a long fraction."""
    return str(x) if x.denominator < 1000 else f"{float(x):.15g}"


def data_charges(density, occupied=False):
    """The charges where the data sit: histogram bin centres (only those
    with counts when ``occupied``), grid points of ln P, and for slopes the
    interval edges q -+ width / 2."""
    if density.kind == "slopes":
        return np.unique(np.concatenate([density.q - density.width / 2,
                                         density.q + density.width / 2]))
    if density.kind == "histogram" and occupied:
        return density.q[density.value > 0]
    return np.asarray(density.q, dtype=float)


def integer_step(q):
    """The spacing of integer-valued charges (the gcd of their differences),
    or None when some charge is not an integer: the detection rule that the
    samples binning uses."""
    q = np.asarray(q, dtype=float)
    if len(q) < 2 or not np.all(q == np.rint(q)) or np.abs(q).max() > 2.0 ** 52:
        return None
    diffs = np.unique((q - q.min()).astype(np.int64))
    g = int(np.gcd.reduce(diffs[diffs > 0])) if np.any(diffs > 0) else 1
    return max(g, 1)


def _snap(x, step):
    """x as an exact fraction: a small-denominator rational when one lies
    within the lattice tolerance (thirds, halves), else the float itself."""
    exact = Fraction(float(x))
    near = exact.limit_denominator(max(1000, 1000 * step.denominator))
    if abs(float(near) - x) <= LATTICE_RTOL * max(1.0, abs(x)) * 1e-3:
        return near
    return exact


def lattice_through(q, step):
    """The smallest lattice of the given step that holds every charge q, or
    None when some charge lies off every such lattice."""
    q = np.sort(np.asarray(q, dtype=float))
    start = _snap(q[0], step)
    k = (q - float(start)) / float(step)
    r = np.rint(k)
    if np.any(np.abs(k - r) > LATTICE_RTOL * np.maximum(1.0, np.abs(k))):
        return None
    return Lattice(step=step, start=start, count=int(r[-1]) + 1)


# ------------------------------------------------------------- the models

@dataclass(frozen=True)
class LatticeModel:
    """P(Q_j) at the points of a lattice; an immutable value.

    Exactly one of
      base        a ChebyshevModel of ln P (the smoothed route), evaluated at
                  the lattice points by the engine in ball arithmetic;
      log_values  exact ln P_j as Fractions, None where P_j = 0 (direct);
      counts      exact P_j >= 0 as Fractions (direct, histogram counts).
    complete      the data cover every value the charge can take, so nothing
                  lies beyond the range (a finite system's magnetisation).
    tail_slopes   d ln P/dQ at the two ends for the tail beyond the range (for
                  measured values: a smooth fit's, steadier than the counts
                  at an edge); None: from the values themselves.
    """

    lattice: Lattice
    base: object = None
    log_values: tuple = None
    counts: tuple = None
    parity: str = "none"
    complete: bool = False
    tail_slopes: tuple = None

    integrand = "lattice-sum"

    @property
    def route(self):
        return "smoothed" if self.base is not None else "direct"

    @property
    def degree(self):
        return None if self.base is None else self.base.degree

    @property
    def label(self):
        return f"lattice:{self.base.label}" if self.base is not None else "lattice:measured"

    @property
    def chi2(self):
        return float("nan") if self.base is None else self.base.chi2

    @property
    def dof(self):
        return 0 if self.base is None else self.base.dof

    @property
    def domain(self):
        return float(self.lattice.start), float(self.lattice.stop)

    def log_weights(self):
        """ln P at the lattice points in double precision (-inf where P = 0),
        for moments, tails and figures; the sums use the exact values."""
        if self.base is not None:
            return np.asarray(self.base.log_density(self.lattice.points()), dtype=float)
        if self.counts is not None:
            c = np.array([float(v) for v in self.counts])
            with np.errstate(divide="ignore"):
                return np.log(c)
        return np.array([-math.inf if v is None else float(v) for v in self.log_values])

    def weights(self):
        """P_j / max P in double precision (underflow to 0 is harmless here)."""
        lw = self.log_weights()
        return np.exp(lw - np.max(lw))

    def log_density(self, q):
        if self.base is not None:
            return self.base.log_density(q)
        lw = self.log_weights()
        finite = np.isfinite(lw)
        floor = lw[finite].min() - 50.0
        return np.interp(q, self.lattice.points(), np.where(finite, lw, floor))

    def derivative(self, q):
        if self.base is not None:
            return self.base.derivative(q)
        lw = self.log_weights()
        floor = lw[np.isfinite(lw)].min() - 50.0
        lw = np.where(np.isfinite(lw), lw, floor)
        slopes = np.diff(lw) / float(self.lattice.step)
        pts = self.lattice.points()
        i = np.clip(np.searchsorted(pts, q, side="right") - 1, 0, len(slopes) - 1)
        return slopes[i]

    def edge_slopes(self, points=4):
        """d ln P / dQ at the two ends of the range: the model's derivative,
        or for measured values the mean finite difference over the last
        ``points`` steps (one step is too noisy for counts near an edge)."""
        if self.tail_slopes is not None:
            return self.tail_slopes
        if self.base is not None:
            a, b = self.domain
            return float(self.base.derivative(a)), float(self.base.derivative(b))
        lw = self.log_weights()
        idx = np.flatnonzero(np.isfinite(lw))
        s = float(self.lattice.step)
        if len(idx) < 2:
            return math.inf, -math.inf
        m = min(points, len(idx) - 1)
        lo = (lw[idx[m]] - lw[idx[0]]) / ((idx[m] - idx[0]) * s)
        hi = (lw[idx[-1]] - lw[idx[-1 - m]]) / ((idx[-1] - idx[-1 - m]) * s)
        return float(lo), float(hi)


def smoothed_model(chebyshev, lattice, complete=False):
    """The smoothed route: a Chebyshev model of ln P at the lattice points."""
    return LatticeModel(lattice=lattice, base=chebyshev, parity=chebyshev.parity,
                        complete=complete)


def direct_problem(density, lattice):
    """Why the measured values cannot be summed directly on this lattice
    (a sentence), or None when they can."""
    if density.kind == "histogram":
        return None
    if density.kind == "log_density":
        idx = lattice.index(density.q)
        missing = lattice.count - len(np.unique(idx))
        if missing:
            return (f"ln P is given at {len(idx)} of the {lattice.count} lattice points of its "
                    "range; the direct sum needs every one")
        return None
    lo = lattice.index(density.q - density.width / 2)
    if not np.allclose(density.width, float(lattice.step), rtol=LATTICE_RTOL, atol=0):
        return ("the slope intervals are not one lattice step wide, so they do not give "
                "ln P(Q + s) - ln P(Q) point by point")
    if np.any(np.diff(lo) != 1):
        return "the slope intervals leave gaps or overlap"
    return None


def direct_model(density, lattice, values=None, complete=False):
    """The direct route: the measured P(Q_j) (``values`` overrides the
    density's central values, for replicas). Histogram counts are taken per
    lattice point (points without a bin hold 0); ln P as given; slopes of
    width s summed exactly, ln P(Q_0) = 0."""
    value = density.value if values is None else np.asarray(values, dtype=float)
    parity = density.symmetry or "none"
    if density.kind == "histogram":
        counts = [Fraction(0)] * lattice.count
        for j, c in zip(lattice.index(density.q), value):
            counts[j] += Fraction(float(c))
        return LatticeModel(lattice=lattice, counts=tuple(counts), parity=parity,
                            complete=complete)
    if density.kind == "log_density":
        logs = [None] * lattice.count
        for j, v in zip(lattice.index(density.q), value):
            logs[j] = Fraction(float(v))
        return LatticeModel(lattice=lattice, log_values=tuple(logs), parity=parity,
                            complete=complete)
    logs, total = [Fraction(0)], Fraction(0)
    for s, w in zip(value, density.width):
        total += Fraction(float(s)) * Fraction(float(w))
        logs.append(total)
    return LatticeModel(lattice=lattice, log_values=tuple(logs), parity=parity,
                        complete=complete)


# ------------------------------------------------------------- input resolution

def written_resolution(values):
    """Half a unit in the last place to which each value was written, as far
    as the doubles tell: the file is taken as written either with a fixed
    number of significant digits (the largest count among its values) or
    with a fixed number of decimals (the finest last place among them), and
    each value gets the coarser of the two. The shortest decimal that gives
    the same double stands for what was written (trailing zeros are lost,
    which the two rules absorb)."""
    vals = np.asarray(values, dtype=float)
    tops, lasts, sigs = [], [], []
    for v in vals:
        if v == 0:
            continue
        d = decimal.Decimal(repr(float(v))).normalize()
        t = d.as_tuple()
        lasts.append(min(t.exponent, 0) if float(v).is_integer() else t.exponent)
        sigs.append(len(t.digits))
        tops.append(int(math.floor(math.log10(abs(v)))))
    if not lasts:
        return np.zeros_like(vals)
    sig, finest = max(sigs), min(lasts)
    out = np.full_like(vals, 0.5 * 10.0 ** finest)
    nz = np.flatnonzero(vals != 0)
    for i, top in zip(nz, tops):
        out[i] = max(out[i], 0.5 * 10.0 ** (top - sig + 1))
    return out


def log_resolution(density):
    """Half-width of the interval each measured ln P_j is known in from the
    way the numbers are stored, per lattice point of the direct model: 0 for
    counts; the written resolution of ln P (one replica) or a few units of
    double rounding (a replica mean); for slopes the resolutions of the
    slopes times the widths, summed along the chain."""
    if density.kind == "histogram":
        return None
    v = np.asarray(density.value, dtype=float)
    if density.replicas is None:
        # a double holds its value to half a unit in its last binary place,
        # however many decimals its shortest form shows
        res = np.maximum(written_resolution(v), 0.5 * np.spacing(np.abs(v)))
    else:
        res = 4 * np.abs(v) * 2.0 ** -52 + 1e-300
    if density.kind == "slopes":
        res = np.concatenate([[0.0], np.cumsum(res * density.width)])
    return res
