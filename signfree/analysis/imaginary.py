"""Mu off the real axis, and the check against measurements at imaginary mu.

At mu = mu_r + i nu the integrand rho(q) e^{-nu q} e^{i mu_r q} is that of the
tilted model c_1 -> c_1 - nu half (moment_rows.tilted) at the real mu_r, so

    Z(mu)/Z(0) = [Z_nu(mu_r) / Z_nu(0)] * L(nu),   L(nu) = Int rho e^{-nu q} / Int rho,

the first factor from the engine (its cancellation is that of the real part
only; none at all on the imaginary axis) and L(nu), a Laplace transform
without cancellation, from engine.complex_mu's evaluator with its own
precision and node checks. Every ratio observable needs the tilted model's
rows only. A mu is written as asked; the tilt of the rounded coefficient
differs from the nu asked by about 1e-16 nu, and twice that difference
times |d/dnu| of each value is added to its quadrature error.

At mu = i nu a direct simulation has no sign problem, so a measured
<q>(nu) / V (io.references) tests the smoothing: the predicted n(i nu) is
compared point by point and by chi^2 = r^T C^-1 r, with C the reference
errors squared, plus the covariance of the prediction over the nu points
(from the same resamples, or the propagated fit covariance) and the squared
sum of its quadrature, model and edge errors on the diagonal.
"""
from dataclasses import dataclass, field
from fractions import Fraction

import mpmath
import numpy as np
from flint import ctx

from signfree.analysis.moment_rows import radius, tilted, to_mpc, weight_rows
from signfree.analysis.mu_spec import ComplexMu
from signfree.analysis.ratios import (INF, ObsValue, cells, deviations, evaluate_set,
                                           moment, natural_scales, short, stat_from,
                                           stat_plan)
from signfree.analysis.results import ResultTable, Row, error_string, format_mu
from signfree.analysis.weights import Observable
from signfree.engine.balls import LOG2_10
from signfree.engine.complex_mu import ContourError, Evaluator
from signfree.models.chebyshev import chi2_sf


def laplace(model, nus, digits):
    """L(nu) = Z(i nu)/Z(0) for exact nus, as (mpc, error bound) pairs (None
    where the evaluator fails): one evaluator of engine.complex_mu, each Z
    to 2^-want relative accuracy, rounding and quadrature."""
    lo, hi = min([0] + list(nus)), max([0] + list(nus))
    ev = Evaluator(model, (0, 0, lo, hi), digits)
    want = int((digits + 2) * LOG2_10)
    zero = (Fraction(0), Fraction(0))
    try:
        z0 = ev.segment(zero, zero, 1, want_bits=want)[0][0]
    except ContourError:
        return [None] * len(nus)
    out = []
    for nu in nus:
        try:
            z = ev.segment((Fraction(0), Fraction(nu)), zero, 1, want_bits=want)[0][0]
        except ContourError:
            out.append(None)
            continue
        with ctx.workprec(ev.prec + 32):
            r = z / z0
        value = to_mpc(r)
        out.append((value, radius(r) + 4 * abs(value) * mpmath.mpf(2) ** -want))
    return out


def _nu_slopes(wr, obs, volume, i):
    """|d f / d nu| at mu_i of the tilted rows: |<O q> - <O><q>| for a ratio
    (and n), |kappa_3| / V for chi."""
    q1 = moment(wr, (0, 1), i)[0]
    if obs.kind == "chi":
        m2, m3 = moment(wr, (0, 0, 1), i)[0], moment(wr, (0, 0, 0, 1), i)[0]
        with ctx.workprec(wr.prec + 32):
            k3 = m3 - 3 * m2 * q1 + 2 * q1 * q1 * q1
        return abs(to_mpc(k3)) / volume
    poly = (0, Fraction(1) / Fraction(volume)) if obs.kind == "n" else obs.poly
    m = moment(wr, poly, i)[0]
    mq = moment(wr, (0,) + tuple(poly), i)[0]
    with ctx.workprec(wr.prec + 32):
        c = mq - m * q1
    return abs(to_mpc(c))


def off_axis(analysis, points, observables, settings, volume, with_z):
    """For points (mu_r, nu) exact: per observable a list of ObsValue, and
    (with_z) a list of Rows of Z(mu)/Z(0)."""
    model, neighbours = analysis.model, list(analysis.fit.next_models)
    plan = stat_plan(analysis, settings, model)
    method, resamples, cov = plan
    digits = min(settings.digits + 3, 1000)
    order = max([o.order for o in observables] + [0])
    groups = {}
    for k, (re_, nu) in enumerate(points):
        groups.setdefault(nu, []).append((k, re_))
    raw = {o.name: [None] * len(points) for o in observables}
    zdata = [None] * len(points)
    for nu, items in groups.items():
        collect = {}
        got, wr = evaluate_set(model, neighbours, plan, [r for _, r in items], observables,
                               volume, digits, transform=lambda m, nu=nu: tilted(m, nu)[0],
                               min_order=max(order + 1, 3 if any(o.kind == "chi" for o in
                                                                 observables) else 1),
                               collect=collect)
        dnu = abs(tilted(model, nu)[1] - nu)
        for j, (k, _) in enumerate(items):
            for o in observables:
                rec = got[o.name][j]
                if dnu and rec[1] != INF:
                    rec[1] += 2 * dnu * _nu_slopes(wr, o, volume, j)
                raw[o.name][k] = rec
            zdata[k] = (nu, j, collect)
    rows = _z_rows(analysis, points, zdata, plan, settings, digits) if with_z else None
    scales = natural_scales(model, observables, volume)
    values = {}
    for o in observables:
        values[o.name] = [ObsValue(value=rec[0], quad_err=rec[1], edge_err=rec[2],
                                   model_err=rec[3], stat_err=stat_from(rec[4]), dev=rec[4],
                                   scale=scales[o.name], resolved=rec[5],
                                   z_status=rows[k].status if rows else "ok",
                                   digits=settings.digits)
                          for k, rec in enumerate(raw[o.name])]
    return values, rows


def _z_rows(analysis, points, zdata, plan, settings, digits):
    """Rows of Z(mu)/Z(0) = R L at the points (module docstring)."""
    method, resamples, cov = plan
    model, neighbours = analysis.model, list(analysis.fit.next_models)
    nus = sorted({nu for nu, _, _ in zdata})

    def lap(m):
        effs = [tilted(m, nu)[1] for nu in nus]
        return dict(zip(nus, laplace(m, effs, digits)))

    L_c = lap(model)
    L_n = [lap(m) for m in neighbours]
    L_r = [lap(m) for m in resamples] if resamples else []
    zero_rows = None
    if cov is not None:
        zero_rows = weight_rows(model, [Fraction(0)], max(cov[0]), digits)
    rows = []
    for k, (re_, nu) in enumerate(points):
        _, j, col = zdata[k]
        wr = col["central"]
        R = wr.rows[0][j]
        lc = L_c[nu]
        mu = ComplexMu(Fraction(re_), Fraction(nu))
        if lc is None or not R.is_finite():
            value = to_mpc(R) if R.is_finite() else mpmath.mpc(1)
            rows.append(Row(mu=mu, value=value, quad_err=abs(value), edge_err=mpmath.mpf(0),
                            resolved=False, degree=model.degree, digits=settings.digits))
            continue
        L, l_err = lc
        r = to_mpc(R)
        value = r * L
        q1 = moment(wr, (0, 1), j)[0]
        dnu = abs(tilted(model, nu)[1] - nu)
        quad = abs(L) * wr.quad[j] + abs(r) * l_err
        if dnu:
            quad += 2 * dnu * abs(value) * abs(to_mpc(q1))
        edge = abs(L) * wr.edge_error((1,), j)
        model_err = None
        for wn, ln in zip(col["neighbours"], L_n):
            other = ln[nu]
            change = INF if other is None else abs(to_mpc(wn.rows[0][j]) * other[0] - value)
            model_err = max(model_err or mpmath.mpf(0), change)
        stat = None
        if resamples:
            ratios = []
            for wrs, lr in zip(col["resamples"], L_r):
                other = lr[nu]
                ratios.append(np.inf if other is None else
                              complex(to_mpc(wrs.rows[0][j]) * other[0] / value))
            stat = stat_from(deviations(method, 1, ratios))
            stat = stat if stat == INF else stat * abs(value)
        elif cov is not None:
            ks, Lf = cov
            with ctx.workprec(wr.prec + 32):
                grad = [wr.rows[kk][j] / R - zero_rows.rows[kk][0] / zero_rows.rows[0][0]
                        for kk in ks]
            g = np.array([complex(to_mpc(x)) for x in grad])
            dev = Lf.T @ g.real + 1j * (Lf.T @ g.imag)
            stat = stat_from(dev) * abs(value)
        rows.append(Row(mu=mu, value=value, quad_err=quad, edge_err=edge, model_err=model_err,
                        stat_err=stat, resolved=wr.resolved[j], degree=model.degree,
                        digits=settings.digits))
    return rows


@dataclass
class ComplexPart:
    """Rows of Z(mu)/Z(0) at mu off the real axis, with the observables there."""

    rows: list
    observables: tuple
    values: dict
    volume: float = None

    def records(self, columns):
        base = ResultTable(rows=self.rows, model_label="", volume=self.volume).records()
        out = []
        for i, rec in enumerate(base):
            rec["naive_samples"] = ""
            for o in self.observables:
                for suffix, text in zip(("", "_imag", "_err", "_quad_err", "_model_err",
                                         "_edge_err", "_status"), cells(self.values[o.name][i])):
                    rec[o.name + suffix] = text
            out.append({c: rec.get(c, "") for c in columns})
        return out

    def text(self):
        head = ["mu", "Z(mu)/Z(0)", "Im", "delta_f", "status"] + [o.name for o in
                                                                  self.observables]
        lines = []
        recs = ResultTable(rows=self.rows, model_label="", volume=self.volume).records()
        for i, (r, rec) in enumerate(zip(self.rows, recs)):
            lines.append([rec["mu"], rec["avg_phase"] or "(no digit)", rec["avg_phase_imag"],
                          rec["delta_f"], rec["status"]]
                         + [short(self.values[o.name][i]) for o in self.observables])
        widths = [max(len(h), *(len(c[j]) for c in lines)) for j, h in enumerate(head)]
        fmt = "  ".join("{:>%d}" % w for w in widths)
        return "\n".join([fmt.format(*head)] + [fmt.format(*c) for c in lines])


def complex_part(analysis, mus, observables, settings, volume):
    """:class:`ComplexPart` at the ComplexMu ``mus``."""
    points = [(m.real, m.imag) for m in mus]
    values, rows = off_axis(analysis, points, observables, settings, volume, with_z=True)
    return ComplexPart(rows=rows, observables=observables, values=values,
                       volume=analysis.table.volume)


@dataclass
class ImaginaryCheck:
    """Predicted n(i nu) beside a measured reference, and their chi^2."""

    reference: object
    values: list              # ObsValue of n per reference nu
    chi2: float = None
    dof: int = 0
    p_value: float = None
    pulls: list = field(default_factory=list)
    excluded: list = field(default_factory=list)

    COLUMNS = ("nu", "reference", "reference_err", "n", "n_err", "n_total_err", "pull",
               "status")

    def records(self):
        out = []
        for k, (nu, ref, err) in enumerate(zip(self.reference.nu, self.reference.value,
                                                self.reference.error)):
            v = self.values[k]
            pull = self.pulls[k]
            out.append({"nu": format_mu(Fraction(nu)), "reference": repr(ref),
                        "reference_err": repr(err), "n": v.part(v.value.real),
                        "n_err": error_string(v.stat_err),
                        "n_total_err": error_string(v.total_err),
                        "pull": "" if pull is None else f"{pull:.3g}", "status": v.status})
        return out

    def summary(self):
        return {"file": self.reference.source, "points": len(self.values),
                "compared": self.dof, "chi2": self.chi2, "dof": self.dof,
                "p_value": self.p_value, "excluded_nu": self.excluded,
                "covariance": "reference errors, prediction covariance over the points "
                              "from the same resamples or fit covariance, and the "
                              "quadrature + model + edge errors on the diagonal"}

    def line(self):
        if not self.dof:
            return (f"imaginary-mu check against {self.reference.source}: no point could be "
                    "compared")
        text = (f"imaginary-mu check against {self.reference.source}: chi2 = {self.chi2:.3g} "
                f"for {self.dof} points, p = {self.p_value:.3g}")
        if self.excluded:
            text += f" ({len(self.excluded)} point(s) without a resolved prediction left out)"
        return text


def imaginary_check(analysis, reference, settings, volume):
    """n(i nu) at every nu of ``reference`` and the chi^2 of the agreement."""
    n = Observable("n", "n")
    points = [(Fraction(0), Fraction(nu)) for nu in reference.nu]
    values, _ = off_axis(analysis, points, (n,), settings, volume, with_z=False)
    vals = values["n"]
    use = [k for k, v in enumerate(vals) if v.status != "unresolved" and v.total_err != INF]
    excluded = [float(reference.nu[k]) for k in range(len(vals)) if k not in use]
    check = ImaginaryCheck(reference=reference, values=vals, pulls=[None] * len(vals),
                           excluded=excluded)
    if not use:
        return check
    r = np.array([float(vals[k].value.real) - reference.value[k] for k in use])
    C = np.diag([reference.error[k] ** 2 + float(vals[k].quad_err + (vals[k].model_err or 0)
                                                   + vals[k].edge_err) ** 2 for k in use])
    devs = [vals[k].dev for k in use]
    if all(d is not None for d in devs):
        D = np.array([np.real(d) for d in devs])
        C = C + D @ D.T
    chi2 = float(r @ np.linalg.solve(C, r))
    check.chi2, check.dof = chi2, len(use)
    check.p_value = chi2_sf(chi2, len(use))
    for j, k in enumerate(use):
        check.pulls[k] = float(r[j] / np.sqrt(C[j, j]))
    return check
