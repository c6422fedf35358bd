"""Zeros of Z for a charge on a lattice, all at once, in the fugacity plane.

With Q_j = Q_0 + s j and z = exp(i theta s),

    Z(theta) = exp(i theta Q_0) sum_j P_j z^j,

a polynomial in z times a factor without zeros. Its zeros are the roots of
the polynomial, isolated and enclosed by Arb's certified complex root
finder (acb_poly.roots; Johansson, IEEE Trans. Computers 2017), and each root
gives the zeros theta = (arg z + 2 pi k)/s - i ln|z| / s, k integer, of the
periodic Z. The roots found in a box of the theta plane are checked against
the argument principle, N = (1 / 2 pi i) closed-integral Z'/Z dtheta around
the box (Ahlfors, Complex Analysis, 5.2), evaluated on the same polynomial
(:mod:`signfree.analysis.contour`). By the Lee-Yang circle theorem (Lee &
Yang, Phys. Rev. 87, 410 (1952)) the zeros of a ferromagnetic Ising model in
a field lie on |z| = 1, at real theta.

Which roots are zeros of Z and which are artefacts of the data: a root of
a polynomial with noisy coefficients moves by about |dZ| / |Z'| when the
data move by their errors (``noise_shift``), and the part of P beyond the
measured range, continued geometrically as in the tail bound of the phase
factor, would add terms that move it by |tail| / |Z'| (``edge_shift``; the
truncated sum of a zero-free Z has roots of its own, far from |z| = 1, and
this is how they show). A zero is 'ok' only when both shifts and its
enclosure are below 10% of its distance to the nearest other zero.
"""
import time
from dataclasses import dataclass, field
from fractions import Fraction

import mpmath
import numpy as np
from flint import acb, acb_poly, arb, ctx

from signfree import engine
from signfree.analysis import uncertainty
from signfree.analysis.contour import Counter
from signfree.analysis.lattice import _fit, choose_route
from signfree.analysis.lattice_budget import direct_method, linear_errors
from signfree.analysis.zeros import _sci, _with_err, zero_table
from signfree.engine.balls import MAX_PREC, upper
from signfree.engine.complex_mu import ContourError
from signfree.engine.sums import lattice_weights
from signfree.models.lattice import direct_model, log_resolution, smoothed_model

SHIFT_FRACTION = mpmath.mpf("0.1")
PHASE_BITS = 30
EDGE_SHIFTS = 6


def _frac(x):
    return arb(x) if not isinstance(x, Fraction) else arb(x.numerator) / x.denominator


class LatticeEvaluator:
    """Z(theta) and Z'(theta) of one lattice model at complex theta (pairs of
    Fractions), by Horner's rule on its polynomial, the precision raised
    until each Z carries PHASE_BITS bits: the interface
    :class:`signfree.analysis.contour.Counter` counts with."""

    def __init__(self, model, prec=128):
        self.model = model
        self.prec = prec
        self.rows = {}
        w = model.weights()
        q = model.lattice.points()
        self.k1, self.k2 = float((w * q).sum() / w.sum()), 0.0
        self.evaluations = 0

    def poly(self, prec):
        if prec not in self.rows:
            rows, _ = lattice_weights([self.model], prec)
            with ctx.workprec(prec):
                self.rows[prec] = acb_poly([+w for w in rows[0]])
        return self.rows[prec]

    def values(self, theta, prec):
        """(Z, Z') at one complex theta = (re, im) Fractions, as acb."""
        lat = self.model.lattice
        p = self.poly(prec)
        with ctx.workprec(prec):
            t = acb(_frac(theta[0]), _frac(theta[1]))
            s = _frac(lat.step)
            q0 = _frac(lat.start)
            e0 = (acb(0, 1) * t * q0).exp()
            z = (acb(0, 1) * t * s).exp()
            pz = p(z)
            z_val = e0 * pz
            d_val = acb(0, 1) * q0 * z_val + e0 * p.derivative()(z) * acb(0, 1) * s * z
        self.evaluations += 1
        return z_val, d_val

    def segment(self, start, step, count, want_bits=PHASE_BITS):
        zs, ds = [], []
        for k in range(count):
            theta = (start[0] + k * step[0], start[1] + k * step[1])
            while True:
                z, d = self.values(theta, self.prec)
                if z.rel_accuracy_bits() >= want_bits:
                    break
                if self.prec >= MAX_PREC:
                    raise ContourError(theta)
                self.prec = min(MAX_PREC, 2 * self.prec)
            zs.append(z)
            ds.append(d)
        return zs, ds


@dataclass
class FugacityZero:
    """One zero: theta = re + i im with err (the root's enclosure plus how far
    the stored resolution of the values could move it), the root z in the
    fugacity plane, and how far noise and the range could move it."""

    re: mpmath.mpf
    im: mpmath.mpf
    err: mpmath.mpf
    z: mpmath.mpc
    noise_shift: mpmath.mpf = None
    edge_shift: mpmath.mpf = None
    spacing: mpmath.mpf = mpmath.inf

    @property
    def status(self):
        limit = SHIFT_FRACTION * self.spacing
        if self.err >= limit:
            return "unresolved"
        if self.noise_shift is not None and self.noise_shift >= limit:
            return "noise_limited"
        if self.edge_shift is not None and self.edge_shift >= limit:
            return "edge_limited"
        return "ok"


@dataclass
class FugacityResult:
    """Zeros of a lattice Z in a box of the theta plane, with the
    argument-principle count and what the roots rest on."""

    zeros: list
    count: int
    box: tuple
    degree: int
    roots: int
    model: str
    lattice: dict
    digits: int = 12
    notes: list = field(default_factory=list)
    seconds: float = 0.0

    COLUMNS = ("re", "im", "err", "z_re", "z_im", "z_abs", "noise_shift", "edge_shift",
               "status")

    def records(self):
        out = []
        for z in self.zeros:
            zerr = z.err * float(self.lattice["step_value"]) * abs(z.z)
            out.append({"re": _with_err(z.re, z.err, self.digits),
                        "im": _with_err(z.im, z.err, self.digits),
                        "err": _sci(z.err, 2),
                        "z_re": _with_err(z.z.real, zerr, self.digits),
                        "z_im": _with_err(z.z.imag, zerr, self.digits),
                        "z_abs": _with_err(abs(z.z), zerr, self.digits),
                        "noise_shift": "" if z.noise_shift is None else _sci(z.noise_shift, 2),
                        "edge_shift": "" if z.edge_shift is None else _sci(z.edge_shift, 2),
                        "status": z.status})
        return out

    def summary(self):
        statuses = {}
        for z in self.zeros:
            statuses[z.status] = statuses.get(z.status, 0) + 1
        return {"count": self.count, "found": len(self.zeros), "statuses": statuses,
                "box": [str(float(v)) for v in self.box], "model": self.model,
                "lattice": {k: v for k, v in self.lattice.items() if k != "step_value"},
                "polynomial_degree": self.degree, "roots_of_the_polynomial": self.roots,
                "plane": "theta, with z = exp(i theta step) the fugacity",
                "digits": self.digits, "notes": list(self.notes)}

    def text(self):
        recs = self.records()
        head = ["re", "im", "err", "|z|", "arg z", "noise shift", "edge shift", "status"]
        rows = [[r["re"], r["im"], r["err"], r["z_abs"],
                 _sci(mpmath.arg(z.z), 6), r["noise_shift"], r["edge_shift"], r["status"]]
                for r, z in zip(recs, self.zeros)]
        lines = zero_table(head, rows)
        b = self.box
        lines.append(f"box re [{float(b[0]):g}, {float(b[1]):g}], im [{float(b[2]):g}, "
                     f"{float(b[3]):g}] of theta: {self.count} zero(s) by the argument "
                     f"principle, {len(self.zeros)} root(s) of the degree-{self.degree} "
                     "polynomial in z = exp(i theta step)")
        lines += [f"note: {n}" for n in self.notes]
        return "\n".join(lines)


def _mp(z):
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def polynomial_roots(model, digits):
    """(roots as acb, index of the first coefficient, precision): the
    roots of sum_j P_j z^j with leading and trailing zero weights removed,
    the precision raised until Arb isolates them all."""
    prec = max(128, int((digits + 20) * engine.LOG2_10))
    while True:
        rows, _ = lattice_weights([model], prec)
        w = rows[0]
        nz = [j for j, x in enumerate(w) if not x.is_zero()]
        j0, j1 = nz[0], nz[-1] + 1
        with ctx.workprec(prec):
            try:
                roots = acb_poly([+x for x in w[j0:j1]]).roots(
                    tol=arb(2) ** -int((digits + 4) * engine.LOG2_10), maxprec=4 * prec)
                return roots, j0, prec
            except ValueError:
                if prec >= MAX_PREC:
                    raise ValueError("the roots of the polynomial could not be isolated "
                                     f"within {MAX_PREC} bits") from None
                prec = min(MAX_PREC, 2 * prec)


def _images(root, step, box, prec):
    """(theta as mpc, radius) for every image of one root inside the box."""
    re0, re1, im0, im1 = (mpmath.mpf(v.numerator) / v.denominator for v in box)
    s = mpmath.mpf(step.numerator) / step.denominator
    with ctx.workprec(prec):
        lz = root.log()
    base = _mp(lz) / (1j * s)
    rad = upper(acb(lz.real.rad(), lz.imag.rad())) / s
    if not im0 <= base.imag <= im1:
        return []
    period = 2 * mpmath.pi / s
    k0 = int(mpmath.ceil((re0 - base.real) / period))
    out = []
    k = k0
    while base.real + k * period <= re1:
        out.append((base + k * period, rad))
        k += 1
    return out


def _noise(theta, recipe, central, prec):
    """|dZ(theta)| from the statistical errors of the data (module
    docstring), on the scale of the central model's weights."""
    kind = recipe.get("kind")
    if kind is None:
        return None
    lat = central.lattice
    with ctx.workprec(prec):
        t = acb(arb(str(theta.real)), arb(str(theta.imag)))
        e = [(acb(0, 1) * t * _frac(lat.charge(j))).exp() for j in range(lat.count)]
        if kind == "models":
            # each resample's Z(theta)/Z(0), on the central model's scale
            rows, _ = lattice_weights([central] + recipe["models"], prec)
            zc = sum(rows[0], arb(0))
            vals = [_mp(sum((w * x for w, x in zip(r, e)), acb(0)) / sum(r, arb(0)) * zc)
                    for r in rows[1:]]
            return uncertainty.spread_mp(recipe["method"], [[v] for v in vals])[0]
        if kind == "points":
            rows, _ = lattice_weights([central], prec)
            total = sum((arb(float(sg)) ** 2 * (w * abs(x)) ** 2
                         for sg, w, x in zip(recipe["sigma"], rows[0], e)), arb(0))
            return mpmath.sqrt(engine.to_mpf(total))
        ks, L = recipe["ks"], recipe["factor"]
        rows, _ = lattice_weights([central], prec, gradient=ks)
        g = [_mp(sum((w * x for w, x in zip(r, e)), acb(0))) for r in rows[1:]]
    v = np.array([complex(x) for x in g]) if all(abs(x) < 1e300 for x in g) else None
    if v is None:
        return None
    return mpmath.mpf(float(np.sqrt(np.sum(np.abs(L.T @ v) ** 2))))


def _resolution(theta, delta, central, prec):
    """Bound of |dZ(theta)| when each stored ln P_j may be off by delta_j:
    sum_j P_j (exp(delta_j) - 1) |exp(i theta Q_j)|, on the engine's scale."""
    if delta is None:
        return mpmath.mpf(0)
    rows, _ = lattice_weights([central], prec)
    pts = central.lattice.points()
    total = mpmath.mpf(0)
    for w, d, q in zip(rows[0], delta, pts):
        if d > 0:
            total += engine.to_mpf(w.mid()) * mpmath.expm1(d) * mpmath.exp(-theta.imag * q)
    return total


def _edge(theta, central, prec):
    """|tail terms| at complex theta: P beyond each end continued
    geometrically, sum_k P(b) r^k exp(i theta (b + k s)) (inf when the
    continued terms do not fall)."""
    if central.complete:
        return mpmath.mpf(0)
    lw = central.log_weights()
    finite = np.flatnonzero(np.isfinite(lw))
    shift = lw[finite].max()
    lo, hi = central.edge_slopes()
    s = float(central.lattice.step)
    pts = central.lattice.points()
    total = mpmath.mpf(0)
    for j, slope, sign in ((finite[0], -lo, -1), (finite[-1], hi, 1)):
        # |exp(i theta Q)| = exp(-Im theta Q); one step outwards multiplies it by
        growth = float(-theta.imag * sign * s)
        ratio = slope * s + growth
        if ratio >= 0:
            return mpmath.inf
        r = mpmath.exp(ratio)
        total += mpmath.exp(mpmath.mpf(float(lw[j] - shift)) - theta.imag * pts[j]) * r / (1 - r)
    return total


def lattice_zeros(central, box, digits=12, recipe=None, notes=()):
    """Zeros of Z of a lattice model in ``box`` = (re0, re1, im0, im1) of
    the theta plane (module docstring), as a :class:`FugacityResult`."""
    start = time.perf_counter()
    notes = list(notes)
    recipe = recipe or {}
    lat = central.lattice
    roots, j0, prec = polynomial_roots(central, digits)
    found = []
    for r in roots:
        found.extend(_images(r, lat.step, box, prec))
    ev = LatticeEvaluator(central)
    size = max(box[1] - box[0], box[3] - box[2])
    counter = Counter(ev, float(size))
    used, count = list(box), None
    for attempt in range(EDGE_SHIFTS):
        try:
            count = counter.count(tuple(used))
            break
        except ContourError as exc:
            e = exc.edge if exc.edge is not None else 0
            i = [2, 1, 3, 0][e]
            used[i] += size * Fraction(13 * (attempt + 1), 10000) * (1 if e in (1, 2) else -1)
    if count is None:
        notes.append("Z nearly vanishes on the box edges: no argument-principle count")
    elif tuple(used) != tuple(box):
        notes.append("the box edges were moved slightly where Z nearly vanishes on them")
        found = [f for r in roots for f in _images(r, lat.step, tuple(used), prec)]
    if count is not None and count != len(found):
        notes.append(f"the argument principle counts {count} zero(s) in the box, the roots "
                     f"of the polynomial give {len(found)}")
    zeros = []
    # the largest weight on the engine's scale (the edge terms are relative to it)
    top = max(engine.to_mpf(w.mid()) for w in lattice_weights([central], prec)[0][0])
    with mpmath.workdps(max(30, digits + 10)):
        for theta, rad in found:
            z, d = ev.values((Fraction(str(theta.real)), Fraction(str(theta.imag))), prec)
            dz = abs(_mp(d)) or mpmath.inf
            noise = _noise(theta, recipe, central, prec)
            edge = _edge(theta, central, prec)
            moved = _resolution(theta, recipe.get("resolution"), central, prec) / dz
            zeros.append(FugacityZero(
                re=theta.real, im=theta.imag, err=rad + moved,
                z=mpmath.exp(1j * theta * mpmath.mpf(lat.step.numerator) / lat.step.denominator),
                noise_shift=None if noise is None else noise / dz,
                edge_shift=edge * top / dz))
        for z in zeros:
            others = [abs(complex(z.re - o.re, z.im - o.im)) for o in zeros if o is not z]
            z.spacing = mpmath.mpf(min(others)) if others else mpmath.inf
    zeros.sort(key=lambda z: (z.re, z.im))
    bad = sum(1 for z in zeros if z.status != "ok")
    if bad:
        notes.append(f"{bad} root(s) are not supported by the data: noise or the part of P "
                     "beyond the measured range could move them by more than 10% of their "
                     "distance to the nearest other zero (columns noise_shift, edge_shift)")
    return FugacityResult(zeros=zeros, count=count, box=tuple(used), degree=len(roots),
                          roots=len(roots), model=central.label,
                          lattice=dict(lat.describe(), step_value=lat.step), digits=digits,
                          notes=notes, seconds=time.perf_counter() - start)


def find_lattice_zeros(charge, box, s, samples=None, notes=()):
    """Zeros in the theta box for the lattice of ``charge`` (a
    :class:`signfree.analysis.lattice.ChargeLattice`), with the model and
    the statistical errors of ``signfree run`` on the same data."""
    density, lattice, complete = charge.density, charge.lattice, charge.complete
    fit = _fit(density, s)
    route, reason = choose_route(density, s, lattice, fit)
    notes = list(notes) + [f"route {route}: {reason}"]
    recipe = {}
    if route == "mixed":
        # the zeros need one polynomial: the measured values, free of a model
        route = "direct"
        notes.append("the zeros are those of the measured values (the smoothed model serves "
                     "only where a run cannot resolve the measured sum)")
    if route == "smoothed":
        central = smoothed_model(fit.model, lattice, complete)
        method = uncertainty.choose_method(density, s.errors, "chebyshev")
        if method in ("jackknife", "bootstrap"):
            values = uncertainty.resampled_values(density, method, s.bootstrap_samples, s.seed)
            recipe = {"kind": "models", "method": method,
                      "models": [smoothed_model(m, lattice, complete) for m in
                                 uncertainty.resampled_models(density, fit.model, values)]}
        elif method == "covariance":
            ks, factor = uncertainty.coefficient_covariance(density, fit.model)
            recipe = {"kind": "coefficients", "ks": ks, "factor": factor}
    else:
        central = direct_model(density, lattice, complete=complete)
        method = direct_method(density, s.errors, samples)
        if method in ("jackknife", "bootstrap"):
            values = uncertainty.resampled_values(density, method, s.bootstrap_samples, s.seed)
            recipe = {"kind": "models", "method": method,
                      "models": [direct_model(density, lattice, values=v, complete=complete)
                                 for v, _ in values]}
        elif method in ("poisson", "blocking") or (method == "stated"
                                                    and density.kind != "slopes"):
            sigma = linear_errors(central, density, None,
                                  "stated" if method == "stated" else "poisson")[1]
            recipe = {"kind": "points", "sigma": sigma}
    if not recipe:
        notes.append("no statistical errors: noise_shift is empty")
    if route == "direct":
        # the stored resolution of the values moves the zeros too (in err)
        recipe["resolution"] = log_resolution(density)
    return lattice_zeros(central, box, digits=s.digits, recipe=recipe, notes=notes)
