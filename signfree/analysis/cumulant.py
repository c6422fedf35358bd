"""The cumulant route: the truncated series
ln(Z(mu)/Z(0)) = sum_{n <= K} kappa_n (i mu)^n / n! as results rows with their
error budget, and its radius of convergence (the distance from 0 to the
nearest zero of Z; Lee & Yang 1952).
"""
import time
from dataclasses import dataclass

import mpmath
import numpy as np

from signfree import engine, progress
from signfree.analysis.results import Analysis, ResultTable, Row
from signfree.analysis.zero_errors import assess, perturbed_models
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
        """None past the radius: the series says nothing there, not even a
        bound on the depth."""
        if self.beyond_radius:
            return None
        return super().cancel_orders


CUMULANT_STATUSES = ("ok", "edge_limited", "noise_limited", "unresolved", "beyond_radius")


def cumulant_rows(model, mus, reference=None, next_model=None, radius=None, digits=12):
    """Rows (:class:`CumulantRow`) of a cumulant model over mu.

    model_err: with ``reference`` rows (the full transform of the density
    the cumulants describe, with their own errors) the truncation error is
    computed, not estimated: |Z_K - Z_ref| + total_err_ref bounds
    |Z_K - Z_true|. Without a reference, the change to ``next_model`` (an
    estimate only). stat_err from kappa_err by linear propagation,
    |Z| sum_n err_n |mu|^n / n! (an upper bound of the standard error of the
    linearised ln Z for any correlation of the kappa, by Minkowski's
    inequality); edge_err 0 (the reference's edge error is inside its total
    error); 'beyond_radius' where |mu| >= ``radius`` (the distance to the
    nearest zero of Z that the data determine)."""
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
            if reference is not None:
                ref = reference[k]
                model_err = abs(value - ref.value) + ref.total_err
            elif next_model is not None:
                model_err = engine.upper(engine.difference(z, tr.values[1][k]))
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


def convergence_radius(fit, density, mus, digits=6):
    """(radius or None, lower bound or None, notes): the distance from 0 to
    the nearest zero of Z that the data determine
    (:func:`signfree.analysis.zero_errors.assess`), searched in squares
    around 0 that grow from a quarter of max |mu| to 1.05 max |mu| until one
    holds a zero (the first square without one bounds the radius from
    below)."""
    top = max(abs(float(m)) for m in mus)
    if top == 0:
        return None, None, []
    notes = []
    r, lower = top / 4, None
    while True:
        box = (-r, r, -r, r)
        try:
            count, used = count_zeros(fit.model, box, digits=digits)
            if count:
                result = assess(find_zeros(fit.model, box, digits=digits), fit, density)
                notes.extend(result.notes)
                return result.radius, result.radius_lower_bound or lower, notes
        except ContourError as exc:
            return None, lower, notes + [f"convergence radius unknown: {exc}"]
        lower = mpmath.mpf(r)
        if r >= 1.05 * top:
            notes.append(f"no zero of the smoothed model within |Re mu|, |Im mu| <= {r:.4g}: "
                         "the radius of convergence is at least that")
            return None, lower, notes
        r = min(2 * r, 1.05 * top)


def cumulant_source(data, density, fit, order):
    """(kappa, kappa_err or None, source description): k-statistics of raw
    samples, cumulants of a histogram's counts, or of the smoothed density,
    whose errors come from the same resamples as the values (jackknife over
    replicas, or fits drawn from the coefficient covariance)."""
    model = fit.model
    if isinstance(data, Samples):
        sc = sample_cumulants(data, order)
        return sc.kappa, sc.kappa_err, (f"samples (k-statistics, blocked jackknife, block "
                                        f"size {sc.block_size})")
    if density.kind == "histogram":
        return (histogram_cumulants(density, order), histogram_cumulant_errors(density, order),
                "histogram counts")
    kappa = model_cumulants(model, order)
    method, models = perturbed_models(density, fit)
    if len(models) < 2:
        return kappa, None, f"density of {model.label}"
    rows = np.array([[float(k) for k in model_cumulants(m, order, digits=15)] for m in models])
    n = len(rows)
    dev = ((rows - rows.mean(axis=0)) ** 2).sum(axis=0)
    spread = np.sqrt((n - 1) / n * dev) if method == "jackknife" else np.sqrt(dev / (n - 1))
    errs = [float(e) for e in spread]
    return kappa, errs, f"density of {model.label} ({method} over {n} resamples for the errors)"


def analyse_cumulant(density, mus, s, samples=None, reference=None):
    """The truncated cumulant series in closed form. model_err compares it
    with ``reference`` (the Chebyshev analysis of the same data over the same
    mu, an :class:`Analysis`): the truncation error against the density it
    came from, plus that analysis's own errors. Status beyond_radius past
    the nearest zero of Z that the data determine."""
    start = time.perf_counter()
    order, digits, volume = s.order, s.digits, s.volume
    fit = reference.fit if reference is not None else fit_chebyshev(density, parity=s.parity)
    mus = engine.as_fractions(mus)
    kappa, kappa_err, source = cumulant_source(samples if samples is not None else density,
                                               density, fit, order + 2)
    cm = CumulantModel(kappa=tuple(kappa), order=order, parity=fit.model.parity,
                       kappa_err=None if kappa_err is None else tuple(kappa_err))
    progress.report("radius of convergence: zeros of Z near the scan")
    radius, lower, notes = convergence_radius(fit, density, mus)
    rows = cumulant_rows(cm, mus, reference=None if reference is None else reference.table.rows,
                         next_model=None if reference is not None else cm.next_order_model(),
                         radius=radius, digits=digits)
    volume = volume if volume is not None else density.volume
    info = {
        "model": cm.label, "degree": None, "order": order, "parity": cm.parity,
        "cumulants": [mpmath.nstr(k, 12) for k in kappa[:order]],
        "cumulant_errors": None if kappa_err is None else [mpmath.nstr(e, 3)
                                                           for e in kappa_err[:order]],
        "cumulants_from": source,
        "convergence_radius": None if radius is None else float(radius),
        "convergence_radius_at_least": None if lower is None else float(lower),
        "radius_from": f"zeros of Z of {fit.model.label} that the data determine",
        "model_err_against": (f"the full transform of {fit.model.label} and its errors"
                              if reference is not None else "the next non-zero order"),
        "integration": "closed form (cumulant series)", "precision_bits": 0,
        "precision_digits": digits + 10, "nodes": 0,
        "statistical_errors": "linear propagation of the cumulant errors"
        if kappa_err is not None else "none",
        "notes": list(notes),
    }
    table = ResultTable(rows=rows, model_label=cm.label, volume=volume, info=info)
    info["horizon"] = table.horizon()
    return Analysis(density=density, model=cm, fit=fit, transform=None, table=table,
                    seconds=time.perf_counter() - start)
