"""The cumulant route: the truncated series
ln(Z(mu)/Z(0)) = sum_{n <= K} kappa_n (i mu)^n / n! as results rows with their
error budget, and its radius of convergence (the distance from 0 to the
nearest zero of Z; Lee & Yang 1952).
"""
import time
from dataclasses import dataclass

import mpmath

from signfree import engine, progress
from signfree.analysis.results import Analysis, ResultTable, Row
from signfree.analysis.zeros import ContourError, count_zeros, find_zeros
from signfree.engine.moments import model_cumulants
from signfree.io.samples import Samples
from signfree.models.chebyshev import fit_chebyshev
from signfree.models.cumulant import (CumulantModel, histogram_cumulant_errors,
                                      histogram_cumulants, sample_cumulants)


@dataclass(frozen=True)
class CumulantRow(Row):
    """A results row of a cumulant model: the Row statuses plus
    'beyond_radius' (|mu| at or past the convergence radius of the series,
    the distance to the nearest zero of Z; the truncated series is then no
    estimate of Z at all, whatever its model_err says). 'beyond_radius'
    takes precedence, and such a row shows no digits."""

    radius: object = None

    @property
    def beyond_radius(self):
        if self.radius is None:
            return False
        return mpmath.mpf(abs(self.mu).numerator) / abs(self.mu).denominator >= self.radius

    @property
    def status(self):
        if self.beyond_radius:
            return "beyond_radius"
        return super().status

    @property
    def last_digit(self):
        if self.beyond_radius:
            return None
        return super().last_digit

    @property
    def cancel_orders(self):
        if self.beyond_radius:
            return float(-mpmath.log10(self.magnitude + self.total_err))
        return super().cancel_orders


CUMULANT_STATUSES = ("ok", "edge_limited", "noise_limited", "unresolved", "beyond_radius")


def cumulant_rows(model, next_model, mus, radius=None, digits=12):
    """Rows (:class:`CumulantRow`) of a cumulant model over mu: value,
    quad_err (ball radius), model_err = |Z_K - Z_next| against
    ``next_model`` (None: no model error known), divided by
    1 - (|mu| / radius)^(order step) for a finite radius: by the
    Cauchy-Hadamard formula the cumulants grow like n! / radius^n, so the
    terms of the series shrink geometrically with that ratio and the whole
    omitted tail is about the first omitted term over (1 - ratio) (an
    asymptotic estimate, not a bound); stat_err from kappa_err by
    linear propagation, |Z| sum_n err_n |mu|^n / n! (an upper bound of the
    standard error of the linearised ln Z for any correlation of the kappa,
    by Minkowski's inequality), edge_err 0 (the expansion has no data range)
    and the status, 'beyond_radius' where |mu| >= ``radius``."""
    batch = [model] + ([next_model] if next_model is not None else [])
    tr = engine.transform(batch, mus, digits=digits)
    rad = None if radius is None else mpmath.mpf(radius)
    rows = []
    with mpmath.workdps(digits + 10):
        for k, mu in enumerate(tr.mus):
            z = tr.values[0][k]
            value = mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))
            m = abs(mpmath.mpf(mu.numerator) / mu.denominator)
            model_err = None
            if next_model is not None:
                model_err = engine.upper(engine.difference(z, tr.values[1][k]))
                if rad is not None and mpmath.isfinite(rad) and m < rad:
                    # the terms shrink like (|mu| / R)^n (Cauchy-Hadamard):
                    # the omitted tail is about the first omitted term
                    # times 1 / (1 - (|mu| / R)^step)
                    model_err /= 1 - (m / rad) ** (next_model.order - model.order)
            stat = None
            if model.kappa_err is not None:
                stat = abs(value) * mpmath.fsum(
                    mpmath.mpf(model.kappa_err[n - 1] or 0) * m ** n / mpmath.factorial(n)
                    for n, _ in model.exponent_terms())
            rows.append(CumulantRow(mu=mu, value=value, quad_err=tr.quad_err[0][k],
                                    edge_err=mpmath.mpf(0), model_err=model_err,
                                    stat_err=stat, resolved=tr.resolved[k], degree=None,
                                    digits=digits, radius=rad))
    return rows


def convergence_radius(model, mus, digits=6):
    """(radius, notes): the distance from 0 to the nearest zero of the model's
    Z inside the square |Re mu|, |Im mu| <= 1.05 max |mu| (which contains
    every requested mu), or infinity when that square holds no zero (the
    series then converges at every requested mu)."""
    top = max(abs(float(m)) for m in mus)
    if top == 0:
        return mpmath.inf, []
    M = 1.05 * top
    box = (-M, M, -M, M)
    notes = []
    try:
        count, used = count_zeros(model, box, digits=digits)
        if count == 0:
            return mpmath.inf, notes
        result = find_zeros(model, box, digits=digits)
    except ContourError as exc:
        return None, [f"convergence radius unknown: {exc}"]
    notes.extend(result.notes)
    if result.radius is None:
        return mpmath.inf, notes
    nearest = min(result.zeros, key=abs)
    if nearest.edge_limited:
        notes.append(f"the nearest zero of Z (|mu| = {mpmath.nstr(abs(nearest), 6)}) may be an "
                     "artefact of the finite data range; the radius may be larger")
    return result.radius, notes


def cumulant_source(data, density, model, order):
    """(kappa, kappa_err or None, source description)."""
    if isinstance(data, Samples):
        sc = sample_cumulants(data, order)
        return sc.kappa, sc.kappa_err, (f"samples (k-statistics, blocked jackknife, block "
                                        f"size {sc.block_size})")
    if density.kind == "histogram":
        return (histogram_cumulants(density, order), histogram_cumulant_errors(density, order),
                "histogram counts")
    return model_cumulants(model, order), None, f"density of {model.label}"


def analyse_cumulant(density, mus, s, samples=None):
    """The truncated cumulant series in closed form: model_err from the next
    non-zero order, status beyond_radius past the nearest zero of Z of the
    Chebyshev model (the series' radius of convergence)."""
    start = time.perf_counter()
    order, digits, volume, parity = s.order, s.digits, s.volume, s.parity
    fit = fit_chebyshev(density, parity=parity)
    mus = engine.as_fractions(mus)
    kappa, kappa_err, source = cumulant_source(samples if samples is not None else density,
                                                density, fit.model, order + 2)
    cm = CumulantModel(kappa=tuple(kappa), order=order, parity=fit.model.parity,
                       kappa_err=None if kappa_err is None else tuple(kappa_err))
    nxt = cm.next_order_model()
    progress.report("radius of convergence: zeros of Z near the scan")
    radius, notes = convergence_radius(fit.model, mus)
    rows = cumulant_rows(cm, nxt, mus, radius=radius, digits=digits)
    volume = volume if volume is not None else density.volume
    info = {
        "model": cm.label, "degree": None, "order": order, "parity": cm.parity,
        "cumulants": [mpmath.nstr(k, 12) for k in kappa[:order]],
        "cumulant_errors": None if kappa_err is None else [mpmath.nstr(e, 3)
                                                           for e in kappa_err[:order]],
        "cumulants_from": source,
        "convergence_radius": None if radius is None else
        ("inf" if radius == mpmath.inf else float(radius)),
        "radius_from": f"zeros of Z of {fit.model.label}",
        "model_err_against": None if nxt is None else nxt.label,
        "integration": "closed form (cumulant series)", "precision_bits": 0,
        "precision_digits": digits + 10, "nodes": 0,
        "statistical_errors": "linear propagation of the cumulant errors"
        if kappa_err is not None else "none",
        "notes": list(notes) + ([] if nxt is not None else
                                ["no higher non-zero cumulant: model_err is empty"]),
    }
    table = ResultTable(rows=rows, model_label=cm.label, volume=volume, info=info)
    info["horizon"] = table.horizon()
    return Analysis(density=density, model=cm, fit=fit, transform=None, table=table,
                    seconds=time.perf_counter() - start)
