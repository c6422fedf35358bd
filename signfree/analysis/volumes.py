"""Several volumes to the infinite-volume limit of the free-energy density.

Per volume V and mu the free-energy density difference is
Delta f_V(mu) = -ln|Z(mu)/Z(0)| / V. A row's total error e bounds |Z| to
[m - e, m + e] (m = |Z(mu)/Z(0)|), so Delta f_V lies within
-ln(1 - e/m) / V of its value; that bound is the error of Delta f_V here.

Per mu, a weighted least-squares fit in x = V_min / V,

    Delta f_V = f_inf + d_1 x + ... + d_p x^p,

gives the infinite-volume value as the intercept (finite-size corrections in
powers of 1/V: common practice for densities of extensive quantities with
periodic boundaries). The order p is the smallest, up to MAX_ORDER and to
n_volumes - 2 (one degree of freedom left for the test), whose chi^2 is
consistent with the errors, P(chi^2_dof >= chi^2) >= 0.05 -- the rule the
Chebyshev degree follows. Its error budget:

  fit_err    sum_j |a_j| err_j, where f_inf = sum_j a_j Delta f_j: the
             largest change of the intercept the per-volume errors allow
             (they include bounds -- edge, model, quadrature -- that may be
             correlated between volumes, so they are added linearly), times
             sqrt(chi^2/dof) when that exceeds 1 (the scale factor of the
             Particle Data Group, Review of Particle Physics, Introduction)
  order_err  |f_inf(p) - f_inf(p + 1)|: the change when one more power of
             1/V is fitted (the analogue of model_err)

Status of an infinite-volume row, in order of precedence:

  too_few_volumes  fewer volumes than the fit needs (two, or p + 2)
  volume_missing   an ensemble of the group gave no result
  past_horizon     mu lies past the horizon of a volume (where its signal is
                   lost; usually the largest volume's comes first)
  volume_not_ok    a volume's row at this mu is not ok
  poor_fit         no order tried has an acceptable chi^2
  ok               otherwise: the per-volume rows are ok and the fit in 1/V
                   is consistent with their errors
"""
import math
from dataclasses import dataclass, field
from decimal import Decimal

import mpmath
import numpy as np

from signfree.analysis.results import format_mu

MAX_ORDER = 2
P_MIN = 0.05
FLOAT_FLOOR = 8 * np.finfo(float).eps
LIMIT_STATUSES = ("ok", "poor_fit", "volume_not_ok", "past_horizon", "volume_missing",
                  "too_few_volumes")
POINT_COLUMNS = ("mu", "volume", "delta_f", "delta_f_err", "status", "past_horizon")
LIMIT_COLUMNS = ("mu", "delta_f", "total_err", "fit_err", "order_err", "order", "chi2", "dof",
                 "p_value", "status", "reason")


@dataclass(frozen=True)
class VolumePoint:
    """Delta f_V at one mu: ``delta_f`` and its error bound ``err`` (floats,
    None when the row supports no digit), the row's status and whether mu
    lies past the horizon of this volume. ``mu`` is its canonical text;
    ``text`` the (value, error) strings it was read from, if it was."""

    mu: str
    volume: float
    delta_f: float = None
    err: float = None
    status: str = "ok"
    past_horizon: bool = False
    text: tuple = None


def free_energy_points(table, volume=None):
    """The :class:`VolumePoint` of every row of a
    :class:`~signfree.analysis.results.ResultTable` (volume: the table's
    own unless given)."""
    volume = table.volume if volume is None else volume
    if volume is None:
        raise ValueError("no volume: Delta f needs the volume of the ensemble")
    volume = float(volume)
    horizon = (table.info or {}).get("horizon") or {}
    h = horizon.get("mu")
    points = []
    for r in table.rows:
        past = h is None or abs(float(r.mu)) > h
        df = err = None
        if r.last_digit is not None:
            with mpmath.workdps(40):
                m, e = r.magnitude, r.total_err
                exact = -mpmath.log(m) / volume
                bound = -mpmath.log1p(-e / m) / volume
                df = float(exact)
                # the float carries the value to half a unit in its last place
                err = math.nextafter(float(bound), math.inf) + math.ulp(df)
        points.append(VolumePoint(format_mu(r.mu), volume, df, err, r.status, past))
    return points


# ---------------------------------------------------------------------------
# text forms (delta_f.csv of an ensemble, per_volume.csv)

def value_and_error(x, err):
    """(value, error) as decimal strings: the error rounded up to two
    significant digits and the value to the position of the error's second
    digit (at most 16 significant digits); ('', '') for no value."""
    if x is None or err is None or not math.isfinite(err):
        return "", ""
    top = _exponent(x) if x != 0 else -400
    last = _exponent(err) - 1 if err > 0 else top - 15
    last = max(last, top - 15)
    unit = Decimal(1).scaleb(last)
    value = Decimal(repr(float(x))).quantize(unit)
    if err == 0:
        return _plain(value), "0"
    steps = math.ceil(Decimal(repr(float(err))) / unit)
    return _plain(value), _plain(Decimal(steps).scaleb(last))


def _exponent(x):
    return Decimal(repr(abs(float(x)))).adjusted()


def _plain(d):
    return format(d, "g")


def read_back(value, error):
    """(float value, float error) of strings written by
    :func:`value_and_error`; the error grows by half a unit in the value's
    last digit (its rounding) and by the float conversion."""
    if not value or not error:
        return None, None
    d = Decimal(value)
    half = Decimal(5).scaleb(d.as_tuple().exponent - 1)
    x = float(d)
    err = float(Decimal(error) + half)
    return x, math.nextafter(err, math.inf) + math.ulp(x)


def point_records(points):
    """Rows of per_volume.csv / delta_f.csv."""
    out = []
    for p in points:
        value, err = p.text or value_and_error(p.delta_f, p.err)
        out.append({"mu": p.mu, "volume": f"{p.volume:.15g}", "delta_f": value,
                    "delta_f_err": err, "status": p.status,
                    "past_horizon": "yes" if p.past_horizon else "no"})
    return out


def points_from_records(records):
    """:class:`VolumePoint` from rows of :func:`point_records`."""
    out = []
    for rec in records:
        df, err = read_back(rec["delta_f"], rec["delta_f_err"])
        out.append(VolumePoint(rec["mu"], float(rec["volume"]), df, err, rec["status"],
                               rec["past_horizon"] == "yes",
                               (rec["delta_f"], rec["delta_f_err"])))
    return out


# ---------------------------------------------------------------------------
# the fit in 1/V

@dataclass(frozen=True)
class InverseVolumeFit:
    """A weighted least-squares fit of Delta f_V in x = V_min / V of one
    order: the intercept, its linear weights (intercept = weights @ values),
    chi^2 and degrees of freedom."""

    order: int
    intercept: float
    weights: np.ndarray
    chi2: float
    dof: int
    errors: np.ndarray = None   # the errors used (after the double-precision floor)

    @property
    def p_value(self):
        """P(chi^2_dof >= chi^2); None without degrees of freedom."""
        if self.dof < 1:
            return None
        from scipy.special import gammaincc
        return float(gammaincc(self.dof / 2, self.chi2 / 2))

    def error(self):
        """sum_j |a_j| err_j, scaled by sqrt(chi^2/dof) when above 1."""
        bound = float(np.abs(self.weights) @ self.errors)
        if self.dof > 0 and self.chi2 > self.dof:
            bound *= math.sqrt(self.chi2 / self.dof)
        return bound


def fit_inverse_volume(volumes, values, errors, order):
    """Fit Delta f_V = f_inf + sum_{k<=order} d_k (V_min/V)^k with weights
    1/err^2, by the pseudo-inverse of the error-scaled design matrix (the
    weights are never squared). The fit runs in double precision, so an error
    below FLOAT_FLOOR times the largest |Delta f| is raised to that."""
    v = np.asarray(volumes, float)
    y = np.asarray(values, float)
    floor = FLOAT_FLOOR * float(np.max(np.abs(y))) if y.size else 0.0
    s = np.maximum(np.asarray(errors, float), max(floor, 1e-300))
    if order > len(v) - 1:
        raise ValueError(f"order {order} needs at least {order + 1} volumes")
    x = v.min() / v
    w = s.min() / s
    design = np.vander(x, order + 1, increasing=True)
    pinv = np.linalg.pinv(design * w[:, None])
    coef = pinv @ (y * w)
    resid = (y - design @ coef) / s
    return InverseVolumeFit(order, float(coef[0]), pinv[0] * w, float(resid @ resid),
                            len(v) - order - 1, s)


def choose_order(volumes, values, errors, order="auto", max_order=MAX_ORDER):
    """(chosen fit, the fit one order higher or None, how it was chosen)."""
    n = len(volumes)
    if order == "auto":
        top = min(max_order, n - 2)
        fits = [fit_inverse_volume(volumes, values, errors, p) for p in range(top + 1)]
        chosen = next((f for f in fits if f.p_value >= P_MIN), None)
        how = f"smallest order with P(chi2) >= {P_MIN}"
        if chosen is None:
            chosen = max(fits, key=lambda f: (f.p_value, f.order))
            how = f"no order up to {top} has P(chi2) >= {P_MIN}: largest P(chi2)"
    else:
        chosen = fit_inverse_volume(volumes, values, errors, order)
        how = "order given"
    higher = (fit_inverse_volume(volumes, values, errors, chosen.order + 1)
              if chosen.order + 1 <= n - 1 else None)
    return chosen, higher, how


# ---------------------------------------------------------------------------
# the infinite-volume table

@dataclass(frozen=True)
class LimitRow:
    """The infinite-volume Delta f at one mu with its error budget."""

    mu: str
    delta_f: float = None
    fit_err: float = None
    order_err: float = None
    order: int = None
    chi2: float = None
    dof: int = None
    p_value: float = None
    status: str = "ok"
    reason: str = ""

    @property
    def total_err(self):
        if self.fit_err is None:
            return None
        return self.fit_err + (self.order_err or 0.0)


@dataclass
class VolumeLimit:
    """Delta f(mu) per volume and its infinite-volume limit."""

    volumes: list
    points: dict            # volume -> [VolumePoint] in mu order
    rows: list              # [LimitRow] in mu order
    info: dict = field(default_factory=dict)

    def records(self):
        """Rows of infinite_volume.csv."""
        out = []
        for r in self.rows:
            value, total = value_and_error(r.delta_f, r.total_err)
            out.append({
                "mu": r.mu, "delta_f": value, "total_err": total,
                "fit_err": _err_text(r.fit_err), "order_err": _err_text(r.order_err),
                "order": "" if r.order is None else str(r.order),
                "chi2": "" if r.chi2 is None else f"{r.chi2:.3g}",
                "dof": "" if r.dof is None else str(r.dof),
                "p_value": "" if r.p_value is None else f"{r.p_value:.3g}",
                "status": r.status, "reason": r.reason})
        return out

    def point_records(self):
        """Rows of per_volume.csv (volumes in increasing order)."""
        return [rec for v in self.volumes for rec in point_records(self.points[v])]

    def status_counts(self):
        counts = {s: 0 for s in LIMIT_STATUSES}
        for r in self.rows:
            counts[r.status] += 1
        return counts

    def horizon(self):
        """The largest |mu| up to which every infinite-volume row is ok (None
        when the first is not)."""
        last = None
        for r in sorted(self.rows, key=lambda r: abs(float(r.mu))):
            if r.status != "ok":
                break
            last = float(r.mu)
        return last


def _err_text(e):
    if e is None:
        return ""
    return "0" if e == 0 else f"{e:.2g}"


def _vtext(v):
    return f"{v:g}"


def extrapolate(curves, order="auto", missing=(), max_order=MAX_ORDER):
    """The infinite-volume limit of Delta f(mu) from ``curves``, one list of
    :class:`VolumePoint` per volume on a common mu grid. ``order`` is 'auto'
    (chosen per mu from the errors) or a fixed power of 1/V; ``missing``
    lists (volume or label, reason) of ensembles of the group that gave no
    result. Returns a :class:`VolumeLimit`."""
    if order != "auto" and (not isinstance(order, int) or order < 0):
        raise ValueError(f"order {order!r}: expected 'auto' or a non-negative integer")
    by_volume = {}
    for curve in curves:
        curve = list(curve)
        if not curve:
            raise ValueError("an ensemble has no mu values")
        v = curve[0].volume
        if v in by_volume:
            raise ValueError(f"volume {_vtext(v)} appears twice")
        by_volume[v] = curve
    volumes = sorted(by_volume)
    grids = {v: [p.mu for p in by_volume[v]] for v in volumes}
    if volumes and any(g != grids[volumes[0]] for g in grids.values()):
        raise ValueError("the volumes do not share one mu grid: "
                         + "; ".join(f"V = {_vtext(v)}: {len(g)} values" for v, g in
                                     grids.items()))
    need = 2 if order == "auto" else order + 2
    rows = []
    for k, mu in enumerate(grids[volumes[0]] if volumes else []):
        pts = [by_volume[v][k] for v in volumes]
        rows.append(_limit_row(mu, pts, order, need, missing, max_order))
    rule = (f"per mu, the smallest order p <= min({max_order}, volumes - 2) in x = V_min/V "
            f"with P(chi2) >= {P_MIN}" if order == "auto" else f"fixed order {order} in 1/V")
    info = {"volumes": volumes, "order_rule": rule,
            "fit_err": "linear sum of |weight| x per-volume error of the intercept, times "
                       "sqrt(chi2/dof) when above 1",
            "order_err": "change of the intercept when one more power of 1/V is fitted",
            "missing": [[_vtext(v) if isinstance(v, float) else str(v), why]
                        for v, why in missing]}
    limit = VolumeLimit(volumes, by_volume, rows, info)
    info["horizon_mu"] = limit.horizon()
    return limit


def _limit_row(mu, pts, order, need, missing, max_order):
    reasons, status = [], []
    if len(pts) < need:
        status.append("too_few_volumes")
        reasons.append(f"{len(pts)} volume(s); the fit needs {need}")
    if missing:
        status.append("volume_missing")
        reasons.append("no result for " + ", ".join(
            f"V = {_vtext(v)}" if isinstance(v, float) else str(v) for v, _ in missing))
    past = [p.volume for p in pts if p.past_horizon]
    if past:
        status.append("past_horizon")
        reasons.append("past the horizon of " + ", ".join(f"V = {_vtext(v)}" for v in past))
    bad = [p for p in pts if p.status != "ok"]
    if bad:
        status.append("volume_not_ok")
        reasons.append(", ".join(f"V = {_vtext(p.volume)} {p.status}" for p in bad))
    have = all(p.delta_f is not None for p in pts)
    if len(pts) < need or not have:
        if not have:
            reasons.append("no supported digit of Delta f at " + ", ".join(
                f"V = {_vtext(p.volume)}" for p in pts if p.delta_f is None))
        return LimitRow(mu, status=status[0] if status else "volume_not_ok",
                        reason="; ".join(reasons))
    vols = [p.volume for p in pts]
    vals = [p.delta_f for p in pts]
    errs = [p.err for p in pts]
    fit, higher, _ = choose_order(vols, vals, errs, order, max_order)
    pval = fit.p_value
    if pval is not None and pval < P_MIN:
        status.append("poor_fit")
        reasons.append(f"chi2 = {fit.chi2:.3g} for {fit.dof} dof (P = {pval:.2g})")
    order_err = None if higher is None else abs(higher.intercept - fit.intercept)
    return LimitRow(mu, fit.intercept, fit.error(), order_err, fit.order, fit.chi2,
                    fit.dof, pval, status[0] if status else "ok", "; ".join(reasons))
