"""Several routes to Z(mu)/Z(0) side by side, and where they agree.

Routes: the Chebyshev smoothing of ln rho at the automatically chosen degree
and at its two neighbours, the truncated cumulant expansion
exp(sum_{n <= K} kappa_n (i mu)^n / n!) for K = 2, 4, 6, ..., the rational
model of the slope and the two-component model (where the data show a
valley), each at its automatic order, and the raw piecewise-linear
reconstruction. Each row carries its own error budget
(:mod:`signfree.analysis.results`); two routes agree at a mu when
|Z_a - Z_b| <= total_err_a + total_err_b, a conservative test since each
total error is itself a sum of bounds. The cumulant routes also carry the
convergence radius of the series, the distance from 0 to the nearest zero
of the chosen Chebyshev model's Z (:mod:`signfree.analysis.zeros`): past it the
series says nothing (status 'beyond_radius').

Cumulants come from the raw samples when the input is a time series
(k-statistics with blocked-jackknife errors), from the counts of a
histogram, and otherwise from the chosen Chebyshev model's density.
"""
import time
from dataclasses import dataclass, field

import mpmath

from signfree import progress

from signfree.analysis.analyse import analyse
from signfree.analysis.cumulant import convergence_radius, cumulant_rows, cumulant_source
from signfree.analysis.results import error_string, format_mu
from signfree.engine import as_fractions
from signfree.io.samples import Samples, density_from_samples
from signfree.models.chebyshev import candidate_degrees, fit_chebyshev
from signfree.models.cumulant import CumulantModel

UNCOMPARABLE = ("unresolved", "beyond_radius", "misfit")   # misfit: a value the data reject
COLUMNS = ("mu", "model", "avg_phase", "avg_phase_imag", "avg_phase_err", "total_err",
           "cancel_orders", "model_err", "status")


@dataclass
class Comparison:
    """Rows per route (label -> list of rows over mu, in the order of
    ``mus``), the reference route (the model --model auto takes: the chosen
    Chebyshev degree, or for two-phase data the rational or two-component
    model) and what the comparison rests on."""

    mus: list
    routes: dict
    reference: str
    radius: object = None
    info: dict = field(default_factory=dict)

    def records(self):
        """One dict per (mu, route), with the keys of compare.csv."""
        out = []
        for k, mu in enumerate(self.mus):
            for label, rows in self.routes.items():
                r = rows[k]
                out.append({
                    "mu": format_mu(mu),
                    "model": label,
                    "avg_phase": r.avg_phase,
                    "avg_phase_imag": r.avg_phase_imag,
                    "avg_phase_err": error_string(r.stat_err),
                    "total_err": error_string(r.total_err),
                    "cancel_orders": "" if r.cancel_orders is None else f"{r.cancel_orders:.2f}",
                    "model_err": error_string(r.model_err),
                    "status": r.status,
                })
        return out

    def verdicts(self):
        """Per mu: which routes agree with the reference within their
        combined errors, which part from it, and which cannot be compared
        (either side without a supported digit, or past the convergence
        radius)."""
        out = []
        ref_rows = self.routes[self.reference]
        for k, mu in enumerate(self.mus):
            ref = ref_rows[k]
            agree, part, skipped = [], [], {}
            for label, rows in self.routes.items():
                if label == self.reference:
                    continue
                r = rows[k]
                if not _comparable(ref) or not _comparable(r):
                    skipped[label] = r.status if not _comparable(r) else \
                        f"reference {ref.status}"
                    continue
                gap = abs(ref.value - r.value)
                (agree if gap <= ref.total_err + r.total_err else part).append(label)
            out.append({"mu": format_mu(mu), "reference": self.reference,
                        "reference_status": ref.status, "agree": agree, "part": part,
                        "skipped": skipped})
        return out

    def text(self):
        labels = list(self.routes)
        head = ["mu"] + labels
        table = []
        for k, mu in enumerate(self.mus):
            cells = [format_mu(mu)]
            for label in labels:
                r = self.routes[label][k]
                v = r.avg_phase or "-"
                cells.append(v if r.status == "ok" else f"{v} ({r.status})")
            table.append(cells)
        widths = [max(len(h), *(len(c[i]) for c in table)) for i, h in enumerate(head)]
        fmt = "  ".join("{:>%d}" % w for w in widths)
        lines = [fmt.format(*head)] + [fmt.format(*c) for c in table]
        lines.append("")
        lines.append(f"reference: {self.reference}; agreement means |a - b| <= total_err_a + "
                     "total_err_b")
        if self.radius is not None:
            lines.append(f"convergence radius of the cumulant series: "
                         f"{mpmath.nstr(self.radius, 6)}")
        for v in self.verdicts():
            text = f"mu = {v['mu']}: agree {', '.join(v['agree']) or '(none)'}"
            if v["part"]:
                text += f"; part {', '.join(v['part'])}"
            if v["skipped"]:
                text += "; not compared " + ", ".join(f"{k} ({s})"
                                                      for k, s in v["skipped"].items())
            lines.append(text)
        for note in self.info.get("notes", []):
            lines.append(f"note: {note}")
        return "\n".join(lines)


def _comparable(row):
    """A row takes part in the comparison when its errors support at least
    the leading digit of its value, it is not past the radius of a series
    and it does not rest on a fit the data reject (misfit): agreement within
    errors as large as the value says nothing."""
    return row.status not in UNCOMPARABLE and row.last_digit is not None


def _neighbour_degrees(density, model):
    """The two degrees next to the chosen one among the candidates of its
    parity (both above it when there is none below)."""
    n = len(density.q) if density.kind == "slopes" else len(density.log_density_points()[0])
    degrees = candidate_degrees(density.kind, n, model.parity)
    if model.degree not in degrees:
        return []
    i = degrees.index(model.degree)
    below = degrees[i - 1:i] if i > 0 else []
    above = degrees[i + 1:i + 3 - len(below)]
    return below + above


def compare(density, mus, digits=12, max_cumulant_order=8, radius="auto"):
    """Every route to Z(mu)/Z(0) for a density (or raw :class:`Samples`,
    which are binned for the smoothings), as a :class:`Comparison`.
    ``radius``: the convergence radius of the cumulant series, or 'auto' to
    take it from the zeros of the chosen Chebyshev model."""
    start = time.perf_counter()
    data = density
    sample_notes = []
    if isinstance(data, Samples):
        density, sample_notes = density_from_samples(data)
    mus = as_fractions(mus)
    if max_cumulant_order < 2:
        raise ValueError(f"max_cumulant_order {max_cumulant_order}: expected at least 2")
    fit = fit_chebyshev(density)
    chosen = fit.model
    routes = {}
    notes = sample_notes + list(fit.notes)
    chosen_rows = None
    # the routes compared here are integrals; a lattice charge is summed by
    # signfree run (signfree.analysis.lattice), and the note says so
    from signfree.analysis.lattice import resolve_lattice
    from signfree.analysis.settings import Settings
    lattice, _ = resolve_lattice(density, Settings(), data if isinstance(data, Samples) else None)
    if lattice is not None:
        notes.append("the charge lies on a lattice: these routes are integrals, which miss the "
                     "aliased terms of its periodic sum near mu = pi/step; signfree run sums "
                     "over the lattice")
    for degree in [chosen.degree] + _neighbour_degrees(density, chosen):
        progress.report(f"route chebyshev:{degree}")
        result = analyse(density, mus, model="chebyshev", degree=degree, digits=digits,
                         parity=chosen.parity, step="continuous")
        routes[result.model.label] = result.table.rows
        if degree == chosen.degree:
            chosen_rows = result.table.rows
    reference = chosen.label
    top = max_cumulant_order - max_cumulant_order % 2
    kappa, kappa_err, source = cumulant_source(data, density, fit, top + 2)
    lower = None
    if radius == "auto":
        progress.report("radius of convergence: zeros of Z near the scan")
        radius, lower, zero_notes = convergence_radius(fit, density, mus)
        notes.extend(zero_notes)
    for K in range(2, top + 1, 2):
        cm = CumulantModel(kappa=tuple(kappa), order=K,
                           kappa_err=None if kappa_err is None else tuple(kappa_err),
                           parity=chosen.parity)
        routes[cm.label] = cumulant_rows(cm, mus, reference=chosen_rows, radius=radius,
                                         digits=digits)
    progress.report("route auto")
    auto = analyse(density, mus, digits=digits, step="continuous")   # what --model auto takes
    for name in ("rational", "two-component"):
        # the models for two-phase data (analysis.model_choice), each at its
        # own automatic order; the reference when --model auto takes one
        if auto.model.label.startswith(name + ":"):
            routes[auto.model.label] = auto.table.rows
            reference = auto.model.label
            continue
        progress.report(f"route {name}")
        try:
            alt = analyse(density, mus, model=name, digits=digits, step="continuous")
        except ValueError as exc:
            notes.append(str(exc))
            continue
        routes[alt.model.label] = alt.table.rows
    progress.report("route piecewise")
    pw = analyse(density, mus, model="piecewise", digits=digits, step="continuous")
    routes["piecewise"] = pw.table.rows
    info = {"cumulants_from": source, "notes": notes,
            "kappa": [mpmath.nstr(k, 15) for k in kappa],
            "kappa_err": None if kappa_err is None else [f"{e:.3g}" for e in kappa_err],
            "degree_criterion": fit.criterion, "parity": chosen.parity,
            "radius_at_least": None if lower is None else float(lower),
            "seconds": round(time.perf_counter() - start, 3)}
    return Comparison(mus=mus, routes=routes, reference=reference, radius=radius, info=info)
