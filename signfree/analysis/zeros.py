"""Zeros of Z(mu) = Int exp(p(q) + i mu q) dq in a box of the complex mu plane,
for a Chebyshev model p of ln rho on its data domain.

Z is entire in mu (the range of q is finite), so the number of zeros inside
a closed contour C on which Z does not vanish is given by the argument
principle, N = (1 / 2 pi i) closed-integral_C Z'/Z dmu = (change of arg Z
along C) / 2 pi (Ahlfors, Complex Analysis, 3rd ed., 5.2), with
Z'(mu) = i Int q exp(p(q) + i mu q) dq from the same quadrature. The zeros
nearest to mu = 0 set the convergence radius of the cumulant expansion of
ln Z (Lee & Yang 1952: the zeros of the partition function in the complex
plane of the field), and real zeros are sign changes of the phase factor.

Method
------
* Z and Z' at complex mu: :mod:`signfree.engine.complex_mu`.
* Counting: the argument principle along the box edges,
  :mod:`signfree.analysis.contour`; where Z nearly vanishes on an edge, the
  edge is moved slightly and the count repeated.
* Isolation: in a box holding N <= POWER_SUM_MAX zeros, the power sums
  s_k = (1 / 2 pi i) closed-integral mu^k Z'/Z dmu = sum of the k-th powers
  of the zeros (trapezoid rule on the contour samples) give, by Newton's
  identities, a polynomial whose roots are starting points (Delves & Lyness,
  Math. Comp. 21, 543 (1967)); Newton's iteration refines each, and if N
  distinct zeros converge inside the box they are all of them. Otherwise
  the box is quartered (split lines nudged off centre, and moved if they
  pass through a zero) and each quarter treated alike. A small box still
  holding N > 1 zeros, where Newton's iteration for an N-fold zero,
  z <- z - N Z/Z' (Schroeder, Math. Ann. 2, 317 (1870)), converges from the
  centroid s_1 / N and a tiny box around the limit counts N again, is
  reported as a cluster of multiplicity N.
  The error estimate of a zero is the last Newton step, taken after the
  step fell below the tolerance (plus the effect of the quadrature and
  rounding error of Z, |dZ| / |Z'|).
* The data range: outside [q_min, q_max] the model density is zero. The
  leading endpoint terms of the integral (integration by parts),
  exp(p(b) + i mu b) / (p'(b) + i mu) at both ends, bound what the unknown
  density beyond the range can change in Z at the level of the first term;
  a zero moves by that over |Z'| (``edge_shift``), and a zero whose
  edge_shift exceeds 10% of its distance to the nearest other zero is
  flagged as a possible artefact of the finite range (the cut-off itself
  makes zeros where the endpoint terms rival Z).
"""
import math
import time
from dataclasses import dataclass, field
from fractions import Fraction

import mpmath
import numpy as np

from signfree import engine, progress
from signfree.analysis.contour import Counter, _cplx, _roots_from_power_sums
from signfree.engine.complex_mu import ContourError, Evaluator, _fmt_complex, _frac

MAX_DEPTH = 40             # quartering levels
SPLIT_OFFSETS = (Fraction(17, 1000), Fraction(-29, 1000), Fraction(43, 1000),
                 Fraction(-61, 1000), Fraction(83, 1000))
EDGE_SHIFTS = 6
POWER_SUM_MAX = 6          # boxes with at most this many zeros: power sums
CLUSTER_BOX = Fraction(1, 256)   # boxes this small (of the first) may hold a cluster
EDGE_FRACTION = mpmath.mpf("0.1")  # edge shift, relative to the zero spacing, that flags


# ------------------------------------------------------------- results

@dataclass(frozen=True)
class Zero:
    """One zero (or cluster) of Z(mu): re + i im, the numerical error of its
    refinement ``err``, multiplicity; and, once assessed against the data
    (:mod:`signfree.analysis.zero_errors`), its statistical, model and
    structure errors and whether the data determine it (``stable``)."""

    re: mpmath.mpf
    im: mpmath.mpf
    err: mpmath.mpf
    multiplicity: int = 1
    converged: bool = True
    edge_shift: mpmath.mpf = None
    stat_err: mpmath.mpf = None
    model_err: mpmath.mpf = None
    structure_err: mpmath.mpf = None
    tracked: bool = True
    stable: bool = None

    @property
    def total_err(self):
        """err + 3 stat + model + structure (the errors known)."""
        return (self.err + 3 * (self.stat_err or 0) + (self.model_err or 0)
                + (self.structure_err if self.structure_err is not None else 0))

    @property
    def edge_limited(self):
        """The ends of the data range could move this zero by more than
        EDGE_FRACTION of its distance to the nearest other zero (or of |mu|)."""
        return self.edge_shift is not None and self.edge_shift >= self._spacing * EDGE_FRACTION

    _spacing = mpmath.inf

    @property
    def value(self):
        return mpmath.mpc(self.re, self.im)

    def __abs__(self):
        return abs(self.value)


@dataclass
class ZeroResult:
    """Zeros of Z(mu) found in a box, the argument-principle count, the
    convergence radius of the cumulant series and what it rests on.

    box         (re0, re1, im0, im1) as used (edges moved slightly where Z
                nearly vanished on them)
    count       zeros in the box by the argument principle
    radius      distance from 0 to the nearest zero found (None if none)
    radius_lower_bound  the series converges at least out to this |mu|: the
                radius if the disc lies in the box, else the distance from 0
                to the box boundary when 0 is inside (None otherwise)
    box_reach   the distance from 0 to the box boundary when 0 lies inside
    note        set when the box does not contain the disc |mu| < radius
    """

    zeros: list
    count: int
    box: tuple
    radius: mpmath.mpf = None
    radius_lower_bound: mpmath.mpf = None
    note: str = None
    notes: list = field(default_factory=list)
    model: str = ""
    digits: int = 12
    evaluations: int = 0
    seconds: float = 0.0
    box_reach: mpmath.mpf = None

    COLUMNS = ("re", "im", "err", "stat_err", "model_err", "structure_err", "total_err",
               "multiplicity", "edge_shift", "status")

    def records(self):
        def e(x):
            return "" if x is None else _sci(x, 2)
        return [{"re": _with_err(z.re, z.total_err, self.digits, z.stable is False),
                 "im": _with_err(z.im, z.total_err, self.digits, z.stable is False),
                 "err": _sci(z.err, 2), "stat_err": e(z.stat_err), "model_err": e(z.model_err),
                 "structure_err": e(z.structure_err), "total_err": e(z.total_err),
                 "multiplicity": str(z.multiplicity),
                 "edge_shift": "" if z.edge_shift is None else _sci(z.edge_shift, 2),
                 "status": {True: "stable", False: "unresolved", None: "not assessed"}[z.stable]}
                for z in self.zeros]

    def summary(self):
        return {"count": self.count, "found": sum(z.multiplicity for z in self.zeros),
                "stable": sum(1 for z in self.zeros if z.stable),
                "radius": None if self.radius is None else _sci(self.radius, self.digits),
                "radius_lower_bound": None if self.radius_lower_bound is None
                else _sci(self.radius_lower_bound, 6),
                "note": self.note, "notes": list(self.notes), "model": self.model,
                "box": [str(float(v)) for v in self.box], "digits": self.digits}

    def text(self):
        head = ["re", "im", "total err", "stat", "model", "structure", "mult", "status"]
        rows = [[r["re"], r["im"], r["total_err"], r["stat_err"], r["model_err"],
                 r["structure_err"], r["multiplicity"], r["status"]] for r in self.records()]
        lines = zero_table(head, rows)
        b = self.box
        lines.append(f"box re [{float(b[0]):g}, {float(b[1]):g}], im [{float(b[2]):g}, "
                     f"{float(b[3]):g}]: {self.count} zero(s) by the argument principle")
        if self.radius is not None:
            lines.append(f"convergence radius of the cumulant series: {_sci(self.radius, 8)} "
                         "(from the nearest zero the data determine)")
        elif self.radius_lower_bound is not None:
            lines.append("convergence radius of the cumulant series: at least "
                         f"{_sci(self.radius_lower_bound, 6)}")
        for note in ([self.note] if self.note else []) + list(self.notes):
            lines.append(f"note: {note}")
        return "\n".join(lines)


def zero_table(head, rows):
    """Lines of a right-aligned table of zeros, or the line saying there
    are none."""
    if not rows:
        return ["no zeros in the box"]
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
    fmt = "  ".join("{:>%d}" % w for w in widths)
    return [fmt.format(*head)] + [fmt.format(*r) for r in rows]


def _sci(x, nsig):
    with mpmath.workdps(max(15, nsig + 5)):
        s = mpmath.nstr(mpmath.mpf(x), max(1, nsig), min_fixed=-4, max_fixed=6)
    return s


def _with_err(x, err, digits, candidate=False):
    """x with the digits that err supports (at most ``digits``); '0' when
    |x| lies below the error. A ``candidate`` (a zero the data do not
    determine) is shown with three digits, to say where the model has it."""
    if candidate:
        return _sci(x, 3)
    if abs(x) <= err:
        return "0"
    top = int(mpmath.floor(mpmath.log10(abs(x))))
    last = top - digits + 1
    if err > 0:
        last = max(last, int(mpmath.floor(mpmath.log10(err))))
    return _sci(x, max(1, top - last + 1))


# ------------------------------------------------------------- the search

def parse_box(spec):
    """'re0:re1,im0:im1' (or a 4-sequence, or ((re0, re1), (im0, im1))) as
    four Fractions; raises ValueError."""
    try:
        if isinstance(spec, str):
            parts = [p.split(":") for p in spec.split(",")]
            if len(parts) != 2 or any(len(p) != 2 for p in parts):
                raise ValueError
            vals = [Fraction(v.strip()) for p in parts for v in p]
        else:
            flat = list(spec)
            if len(flat) == 2:
                flat = list(flat[0]) + list(flat[1])
            if len(flat) != 4:
                raise ValueError
            vals = [_frac(v) for v in flat]
    except (ValueError, TypeError, ZeroDivisionError):
        raise ValueError(f"--box {spec!r}: expected re0:re1,im0:im1 such as "
                         "-3:3,-1:1") from None
    re0, re1, im0, im1 = vals
    if not (re0 < re1 and im0 < im1):
        raise ValueError(f"--box {spec!r}: expected re0 < re1 and im0 < im1")
    return (re0, re1, im0, im1)


def _newton(ev, z0, m, digits, limit_box, max_iter=40):
    """Newton's iteration z <- z - m Z/Z' from z0 (Schroeder's form for an
    m-fold zero), until a step is below 10^-digits of the box scale; then one
    more step, whose size is the error estimate. Returns (z as a Fraction
    pair, error estimate, converged)."""
    re0, re1, im0, im1 = limit_box
    scale = max(mpmath.mpf(1), mpmath.mpf(float(max(abs(re0), abs(re1), abs(im0), abs(im1)))))
    tol = mpmath.mpf(10) ** (-digits) * scale
    z = z0
    prev = mpmath.inf
    growing = 0
    done = False
    for _ in range(max_iter):
        Z, D, dz = ev.point_for_newton(z, digits, scale)
        if D.is_zero():
            return z, mpmath.inf, False
        s = m * Z / D
        step = mpmath.mpc(engine.to_mpf(s.real), engine.to_mpf(s.imag))
        size = abs(step)
        z = (_round_frac(z[0] - _frac(step.real), digits),
             _round_frac(z[1] - _frac(step.imag), digits))
        if not (re0 <= z[0] <= re1 and im0 <= z[1] <= im1):
            return z, mpmath.inf, False
        if done:
            return z, max(size, m * dz / engine.abs_mid(D)), True
        if size <= tol:
            done = True
            continue
        growing = growing + 1 if size >= prev else 0
        if growing >= 4:
            return z, mpmath.inf, False
        prev = size
    return z, prev, False


def _round_frac(x, digits):
    """x rounded to a binary fraction of about digits + 20 significant
    digits, to keep the exact arithmetic small."""
    if x == 0:
        return x
    bits = int((digits + 20) * engine.LOG2_10)
    e = math.frexp(float(x))[1]
    denom = 2 ** max(0, bits - e)
    return Fraction(round(x * denom), denom)


class _Search:
    def __init__(self, model, box, digits):
        self.ev = Evaluator(model, box, digits)
        self.size = max(box[1] - box[0], box[3] - box[2])
        self.counter = Counter(self.ev, float(self.size))
        self.digits = digits
        self.notes = []
        # the outer box with some slack: Newton iterates may leave a box
        # but not this one
        pad = self.size / 2
        self.limit = (box[0] - pad, box[1] + pad, box[2] - pad, box[3] + pad)

    def count_top(self, box):
        """Count in the user's box, moving an edge outwards slightly where Z
        nearly vanishes on it."""
        box = list(box)
        last = None
        for attempt in range(EDGE_SHIFTS):
            try:
                return tuple(box), self.counter.count(tuple(box))
            except ContourError as exc:
                last = exc
                e = exc.edge if exc.edge is not None else 0
                shift = self.size * Fraction(13 * (attempt + 1), 10000)
                i = [2, 1, 3, 0][e]
                old = box[i]
                box[i] += shift if e in (1, 2) else -shift
                self.notes.append(f"Z nearly vanishes on the box edge near mu = "
                                  f"{_fmt_complex(exc.mu)}: edge moved from {float(old):g} "
                                  f"to {float(box[i]):g}")
        raise ContourError(last.mu, last.edge)

    def children(self, box, count):
        """The four quarters of a box with their counts (summing to count),
        or None when no split avoids the zeros."""
        re0, re1, im0, im1 = box
        for k, off in enumerate(SPLIT_OFFSETS):
            off2 = SPLIT_OFFSETS[(k + 2) % len(SPLIT_OFFSETS)]
            rm = re0 + (re1 - re0) * (Fraction(1, 2) + off)
            im = im0 + (im1 - im0) * (Fraction(1, 2) + off2)
            quads = [(re0, rm, im0, im), (rm, re1, im0, im), (re0, rm, im, im1),
                     (rm, re1, im, im1)]
            try:
                counts = [self.counter.count(q) for q in quads]
            except ContourError:
                continue
            if sum(counts) == count:
                return list(zip(quads, counts))
        return None

    def _inside(self, z, box):
        return box[0] <= z[0] <= box[1] and box[2] <= z[1] <= box[3]

    def _distinct(self, zeros, z, err):
        zc = _cplx(z)
        return all(abs(zc - _cplx(o[0])) > 10 * float(err + o[1]) + 1e-12 * float(self.size)
                   for o in zeros)

    def from_power_sums(self, box, count):
        """Zeros of a box holding ``count`` simple zeros: starting points from
        the power sums of the zeros (Delves & Lyness 1967), Newton's iteration
        from each. Returns the zeros if ``count`` distinct ones converge
        inside the box, else None."""
        try:
            _, sums = self.counter.count(box, moments=count)
        except ContourError:
            return None
        c = complex(float(box[0] + box[1]) / 2, float(box[2] + box[3]) / 2)
        r = float(max(box[1] - box[0], box[3] - box[2])) / 2
        starts = [c + r * w for w in _roots_from_power_sums(sums, count)]
        found = []
        for st in starts:
            if not np.isfinite(st):
                continue
            z0 = (_round_frac(Fraction(st.real), 6), _round_frac(Fraction(st.imag), 6))
            z, err, ok = _newton(self.ev, z0, 1, self.digits, self.limit)
            if ok and self._inside(z, box) and self._distinct(found, z, err):
                found.append((z, err))
        if len(found) == count:
            return [self._zero(z, err, 1) for z, err in found]
        return None

    def solve(self, box, count, depth=0):
        progress.report("zeros: isolating", detail=f"{count} in a box at depth {depth}")
        if count == 0:
            return []
        re0, re1, im0, im1 = box
        centre = ((re0 + re1) / 2, (im0 + im1) / 2)
        if count <= POWER_SUM_MAX:
            zeros = self.from_power_sums(box, count)
            if zeros is not None:
                return zeros
        if count > 1 and max(re1 - re0, im1 - im0) <= self.size * CLUSTER_BOX:
            # an N-fold zero or a tight cluster: Newton's iteration for an
            # N-fold zero from the centroid s_1 / N, then count in a tiny box
            try:
                _, sums = self.counter.count(box, moments=1)
                r = float(max(re1 - re0, im1 - im0)) / 2
                g = complex(float(centre[0]), float(centre[1])) + r * sums[0] / count
                start = (_round_frac(Fraction(g.real), 6), _round_frac(Fraction(g.imag), 6))
            except ContourError:
                start = centre
            z, err, ok = _newton(self.ev, start, count, self.digits, self.limit)
            if ok and self._inside(z, box):
                rt = max(self.size * Fraction(1, 10 ** 6), _frac(mpmath.mpf(1000 * err)))
                tiny = (z[0] - rt, z[0] + rt, z[1] - rt, z[1] + rt)
                try:
                    if self.counter.count(tiny) == count:
                        return [self._zero(z, max(err, mpmath.mpf(float(rt))), count)]
                except ContourError:
                    pass
        if depth >= MAX_DEPTH:
            self.notes.append(f"{count} zero(s) near {_fmt_complex(centre)} not separated")
            return [self._zero(centre, mpmath.mpf(float(max(re1 - re0, im1 - im0))), count,
                               converged=False)]
        kids = self.children(box, count)
        if kids is None:
            self.notes.append(f"the box around {_fmt_complex(centre)} could not be split "
                              "without passing through a zero")
            return [self._zero(centre, mpmath.mpf(float(max(re1 - re0, im1 - im0))), count,
                               converged=False)]
        out = []
        for sub, c in kids:
            out.extend(self.solve(sub, c, depth + 1))
        return out

    def with_edge_shifts(self, zeros):
        """The zeros with edge_shift: how far the leading endpoint terms of
        the integral, exp(p(b) + i mu b) / (p'(b) + i mu) at both ends
        (integration by parts, as in :func:`signfree.results.edge_error`),
        could move each zero, |endpoint terms| / |Z'(mu)|."""
        model = self.ev.model
        out = []
        for z in zeros:
            mu = (_frac(z.re), _frac(z.im))
            _, ds = self.ev._sums(mu, (Fraction(0), Fraction(0)), 1, self.ev.n_used,
                                  self.ev.prec)
            dz = engine.abs_mid(ds[0])
            total = mpmath.mpf(0)
            for end in model.domain:
                p = float(model.log_density(end)) - self.ev.shift
                dp = float(model.derivative(end))
                denom = abs(complex(dp - float(z.im), float(z.re))) or 1.0
                total += mpmath.exp(mpmath.mpf(p) - z.im * end) / denom
            shift = total / dz if dz > 0 else mpmath.inf
            spacing = min([abs(z.value - o.value) for o in zeros if o is not z] + [abs(z.value)])
            zz = Zero(re=z.re, im=z.im, err=z.err, multiplicity=z.multiplicity,
                      converged=z.converged, edge_shift=shift)
            object.__setattr__(zz, "_spacing", spacing)
            out.append(zz)
        return out

    @staticmethod
    def _zero(z, err, m, converged=True):
        return Zero(re=mpmath.mpf(z[0].numerator) / z[0].denominator,
                    im=mpmath.mpf(z[1].numerator) / z[1].denominator,
                    err=mpmath.mpf(err), multiplicity=m, converged=converged)


def find_zeros(model, box, digits=12):
    """Zeros of Z(mu) = Int exp(p(q) + i mu q) dq of a Chebyshev model in the
    box re0 <= Re mu <= re1, im0 <= Im mu <= im1 (see the module docstring
    for the method: the argument principle, recursive quartering, Newton's
    iteration). ``box`` is 're0:re1,im0:im1' or (re0, re1, im0, im1).
    Returns a :class:`ZeroResult`."""
    start = time.perf_counter()
    box = parse_box(box)
    with mpmath.workdps(max(30, digits + 10)):
        search = _Search(model, box, digits)
        used, count = search.count_top(box)
        zeros = search.with_edge_shifts(search.solve(used, count))
        zeros.sort(key=lambda z: (abs(z.value), z.re, z.im))
        found = sum(z.multiplicity for z in zeros)
        notes = list(dict.fromkeys(search.notes))
        if found != count:
            notes.append(f"{found} zero(s) refined, but the argument principle counts {count}")
        edgy = sum(1 for z in zeros if z.edge_limited)
        if edgy:
            notes.append(f"{edgy} zero(s) lie where the ends of the data range could move them "
                         f"by more than {int(EDGE_FRACTION * 100)}% of their distance to the "
                         "nearest other zero: they may be artefacts of the finite range "
                         "(column edge_shift)")
        re0, re1, im0, im1 = (mpmath.mpf(v.numerator) / v.denominator for v in used)
        inside0 = re0 < 0 < re1 and im0 < 0 < im1
        to_edge = min(-re0, re1, -im0, im1) if inside0 else None
        radius = min((abs(z.value) for z in zeros), default=None)
        note = None
        if radius is not None:
            if to_edge is not None and radius <= to_edge:
                lower = radius
            else:
                lower = to_edge
                note = (f"the box does not contain the disc |mu| < {_sci(radius, 6)}: zeros "
                        "closer to 0 may lie outside it, so the radius is an upper bound")
        else:
            lower = to_edge
            if to_edge is None:
                note = "no zeros in the box, and the box does not contain mu = 0"
    return ZeroResult(zeros=zeros, count=count, box=used, radius=radius,
                      radius_lower_bound=lower, note=note, notes=notes,
                      model=getattr(model, "label", ""), digits=digits,
                      evaluations=search.ev.evaluations,
                      seconds=time.perf_counter() - start, box_reach=to_edge)


def count_zeros(model, box, digits=12):
    """Only the argument-principle count of zeros of Z in the box (edges
    moved slightly where Z nearly vanishes on them): (count, box used)."""
    box = parse_box(box)
    search = _Search(model, box, digits)
    used, count = search.count_top(box)
    return count, used


# ------------------------------------------------------------- symmetry

def partners(zero, parity="none"):
    """The zeros that symmetry adds to ``zero``: -conj(mu) for every real
    density (conj Z(mu) = Z(-conj mu)), and also -mu and conj(mu) for an
    even one (Z(-mu) = Z(mu))."""
    mus = [mpmath.mpc(-zero.re, zero.im)]
    if parity == "even":
        mus += [mpmath.mpc(-zero.re, -zero.im), mpmath.mpc(zero.re, -zero.im)]
    return [Zero(re=m.real, im=m.imag, err=zero.err, multiplicity=zero.multiplicity,
                 converged=zero.converged) for m in mus]


def with_partners(zeros, parity="none"):
    """``zeros`` completed by their symmetry partners (:func:`partners`),
    a partner left out where a listed zero lies within the errors of it."""
    out = list(zeros)
    for z in zeros:
        for p in partners(z, parity):
            if not any(abs(p.value - o.value) <= p.err + o.err + 1e-30 for o in out):
                out.append(p)
    out.sort(key=lambda z: (abs(z.value), z.re, z.im))
    return out


def unpaired(zeros, box, parity="none"):
    """Zeros whose symmetry partners lie in ``box`` but are not listed
    (a check of a search on a box symmetric about the imaginary axis)."""
    re0, re1, im0, im1 = (mpmath.mpf(float(v)) for v in parse_box(box))
    out = []
    for z in zeros:
        for p in partners(z, parity):
            if re0 < p.re < re1 and im0 < p.im < im1 and not any(
                    abs(p.value - o.value) <= 10 * (p.err + o.err) + 1e-30 for o in zeros):
                out.append(z)
                break
    return out
