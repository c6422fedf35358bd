"""Observables at every mu from the same smoothed density and engine: the
charge density n = <q>_mu / V, its susceptibility chi = (<q^2>_mu -
<q>_mu^2) / V and ratios <O>_mu = Int O rho e^{i mu q} / Int rho e^{i mu q}
for polynomial weights O(q) (names in :mod:`signfree.analysis.weights`).

    result = analyse(density, mus, observables="n,chi,q^2")
    for v in result.observables.real.values["n"]:
        print(v.value, v.stat_err, v.total_err, v.status)

Numerators and denominators come from the engine's derivative rows
(:mod:`signfree.analysis.moment_rows`), in ball arithmetic at the precision
the cancellation needs. Every value carries the errors of a results row:
  quad_err   rounding and quadrature of numerator and denominator, carried
             through the ratio: (|dN| + |<O>| |dZ|) / (|Z| - |dZ|)
  edge_err   the endpoint terms of numerator and denominator, the same way
  model_err  the larger of the change of the ratio when the Chebyshev degree
             is raised to the next two candidates and the structure bound (a
             ripple in ln rho below the noise, carried through numerator and
             denominator; :func:`signfree.analysis.budget.ratio_structure`)
  stat_err   from the ratio itself, numerator and denominator being
             correlated: each jackknife or bootstrap resample of the replicas
             is refitted and its ratio computed (Efron & Stein 1981; Efron
             1979); without replicas, linear propagation of the fit's
             coefficient covariance, d<O>/dc_j = <O T_j> - <O><T_j>
and a status with the precedence of a results row, judged against the
larger of |value| and the observable's natural size at mu = 0 (the spread
of q, kappa_2, or <|O|> under the measured density), so that a value that
is zero by symmetry is not mistaken for noise. A ratio is never better
than Z(mu) at the same mu: where Z is unresolved, noise-limited (its
distribution reaches zero, and a ratio's resampled spread means nothing) or
edge-limited, so is the ratio.
"""
from dataclasses import dataclass, field
from fractions import Fraction

from signfree.analysis import budget
from signfree.analysis.imaginary import complex_part, imaginary_check
from signfree.analysis.mu_spec import ComplexMu, split_real
from signfree.analysis.ratios import (SUFFIXES, ObsValue, cells, evaluate_set,
                                      natural_scales, short, stat_from, stat_plan)
from signfree.analysis.results import format_mu
from signfree.analysis.weights import evaluate, parse_observables
from signfree.models.chebyshev import fit_chebyshev


@dataclass
class ObservableTable:
    """Observables (columns) over mu (rows)."""

    observables: tuple
    mus: list
    values: dict                       # name -> [ObsValue per mu]
    info: dict = field(default_factory=dict)

    def columns(self):
        return tuple(o.name + s for o in self.observables for s in SUFFIXES)

    def column_values(self):
        """name -> one string per mu, the columns added to results.csv."""
        out = {c: [] for c in self.columns()}
        for o in self.observables:
            for v in self.values[o.name]:
                for suffix, text in zip(SUFFIXES, cells(v)):
                    out[o.name + suffix].append(text)
        return out

    def text(self):
        head = ["mu"] + [o.name for o in self.observables]
        lines = []
        for i, mu in enumerate(self.mus):
            row = [format_mu(mu)]
            for o in self.observables:
                v = self.values[o.name][i]
                row.append(short(v))
            lines.append(row)
        widths = [max(len(h), *(len(r[j]) for r in lines)) for j, h in enumerate(head)]
        fmt = "  ".join("{:>%d}" % w for w in widths)
        return "\n".join([fmt.format(*head)] + [fmt.format(*r) for r in lines])


@dataclass
class ObservableResult:
    """What was computed beyond Z(mu): the observables at real mu
    (``real``, an ObservableTable or None), the rows at mu off the real
    axis (``complex``, analysis.imaginary.ComplexPart or None) and the
    comparison with measurements at imaginary mu (``check`` or None)."""

    real: object = None
    complex: object = None
    check: object = None


def real_observables(analysis, observables, settings, volume):
    """The observables at the real mu of ``analysis`` (rows of its table),
    model by model for a per-mu degree choice."""
    table = analysis.table
    mus = [r.mu for r in table.rows]
    digits = min(settings.digits + 3, 1000)
    groups = {}
    if table.info.get("degree") == "per-mu":
        for i, r in enumerate(table.rows):
            groups.setdefault(r.degree, []).append(i)
    else:
        groups[analysis.model.degree] = list(range(len(mus)))
    scales = natural_scales(analysis.model, observables, volume)
    values = {o.name: [None] * len(mus) for o in observables}
    for degree, idx in groups.items():
        if degree == analysis.model.degree and len(groups) == 1:
            model, neighbours = analysis.model, list(analysis.fit.next_models)
        else:
            fit = fit_chebyshev(analysis.density, degree=degree, parity=analysis.model.parity)
            model, neighbours = fit.model, list(fit.next_models)
        plan = stat_plan(analysis, settings, model)
        got, _ = evaluate_set(model, neighbours, plan, [mus[i] for i in idx], observables,
                              volume, digits)
        for o in observables:
            for i, rec in zip(idx, got[o.name]):
                values[o.name][i] = ObsValue(
                    value=rec[0], quad_err=rec[1], edge_err=rec[2], model_err=rec[3],
                    stat_err=stat_from(rec[4]), dev=rec[4], scale=scales[o.name],
                    resolved=rec[5], z_status=table.rows[i].status, digits=settings.digits)
    _add_structure(analysis, observables, values, mus, volume)
    return ObservableTable(observables=observables, mus=mus, values=values,
                           info={"scales": scales})


def _add_structure(analysis, observables, values, mus, volume):
    """The structure bound of every observable (a ripple in ln rho below
    the noise of the data, :func:`signfree.analysis.budget.ratio_structure`)
    joins its model error: n = <q>/V directly, chi = (<q^2> - <q>^2)/V by
    (d<q^2> + 2 |<q>| d<q>)/V, a polynomial ratio directly."""
    fit, density, model = analysis.fit, analysis.density, analysis.model
    if fit is None or fit.sigma is None:
        return
    res, keep = budget.residuals(density, model, fit.correction, fit.sigma)
    zvals = [r.value for r in analysis.table.rows]

    def bound(poly):
        return budget.ratio_structure(density, model, fit.sigma, res, keep,
                                      lambda q: evaluate(poly, q), None, zvals, mus)

    for o in observables:
        if o.kind == "ratio":
            s, _ = bound(o.poly)
        elif o.kind == "n":
            s = [x / volume for x in bound((0, 1))[0]]
        else:
            s1, m1 = bound((0, 1))
            s2, _ = bound((0, 0, 1))
            s = [(b2 + 2 * abs(m) * b1) / volume for b1, b2, m in zip(s1, s2, m1)]
        for v, x in zip(values[o.name], s):
            v.structure_err = x
            v.model_err = x if v.model_err is None else max(v.model_err, x)


def attach_observables(analysis, other, settings):
    """Add to ``analysis`` the observables asked for by ``settings`` at its
    real mu (as extra columns of its table), the rows at the mu ``other``
    off the real axis (as extra rows) and the imaginary-mu comparison; the
    numbers go to ``analysis.observables``."""
    if analysis.fit is None or getattr(analysis.model, "integrand", "") != "chebyshev-exponent":
        raise ValueError("observables and imaginary or complex mu need the Chebyshev model "
                         "(--model chebyshev)")
    observables = parse_observables(settings.observables) if settings.observables else ()
    table = analysis.table
    volume = table.volume
    notes = table.info.setdefault("notes", [])
    if volume is None and any(o.kind in ("n", "chi") for o in observables):
        notes.append("no volume given: n and chi are per system (V = 1)")
    per_volume = 1.0 if volume is None else volume
    result = ObservableResult()
    info = {"names": [o.name for o in observables]}
    if observables:
        result.real = real_observables(analysis, observables, settings, per_volume)
        table.extra_columns.update(result.real.column_values())
        info["scales"] = result.real.info["scales"]
        info["engine_digits"] = min(settings.digits + 3, 1000)
    if other:
        result.complex = complex_part(analysis, other, observables, settings, per_volume)
        table.extra_rows.extend(result.complex.records(table.columns()))
    if settings.imaginary_reference is not None:
        result.check = imaginary_check(analysis, settings.imaginary_reference, settings,
                                       per_volume)
        info["imaginary_check"] = result.check.summary()
    table.info["observables"] = info
    analysis.observables = result
    return analysis


def split_mus(mus):
    """(real mu, mu off the real axis), each in the order given; mu = 0 stands
    in for the real part when every value is off the axis. Python or mpmath
    complex numbers are taken as the exact binary fractions they hold."""
    real, other = split_real([_as_mu(m) for m in mus])
    real = [m for _, m in real] or [Fraction(0)]
    return real, [m for _, m in other]


def _as_mu(m):
    if isinstance(m, ComplexMu):
        return m
    im = getattr(m, "imag", 0)
    if im != 0:
        return ComplexMu(Fraction(float(m.real)), Fraction(float(im)))
    if isinstance(m, complex) or type(m).__name__ == "mpc":
        return Fraction(float(m.real))
    return m


def wanted(settings, other):
    """True when anything beyond Z(mu) at real mu is asked for."""
    return bool(settings.observables or other or settings.imaginary_reference is not None)
