"""Several routes to Z(mu)/Z(0) side by side, and where they agree.

Routes: the Chebyshev smoothing of ln rho at the automatically chosen degree
and at its two neighbours, the truncated cumulant expansion
exp(sum_{n <= K} kappa_n (i mu)^n / n!) for K = 2, 4, 6, ..., and the raw
piecewise-linear reconstruction. Each row carries its own error budget
(:mod:`signfree.results`); two routes agree at a mu when
|Z_a - Z_b| <= total_err_a + total_err_b, a conservative test since each
total error is itself a sum of bounds. The cumulant routes also carry the
convergence radius of the series, the distance from 0 to the nearest zero
of the chosen Chebyshev model's Z (:mod:`signfree.zeros`): past it the
series says nothing (status 'beyond_radius').

Cumulants come from the raw samples when the input is a time series
(k-statistics with blocked-jackknife errors), from the counts of a
histogram, and otherwise from the chosen Chebyshev model's density.
"""
import sys
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import mpmath

from signfree.results import error_string, format_mu

UNCOMPARABLE = ("unresolved", "beyond_radius")
COLUMNS = ("mu", "model", "avg_phase", "avg_phase_imag", "avg_phase_err", "total_err",
           "cancel_orders", "model_err", "status")


@dataclass
class Comparison:
    """Rows per route (label -> list of rows over mu, in the order of
    ``mus``), the reference route (the chosen Chebyshev model) and what the
    comparison rests on."""

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
                    "cancel_orders": f"{r.cancel_orders:.2f}",
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
    the leading digit of its value and it is not past the radius of a
    series: agreement within errors as large as the value says nothing."""
    return row.status not in UNCOMPARABLE and row.last_digit is not None


def _neighbour_degrees(density, model):
    """The two degrees next to the chosen one among the candidates of its
    parity (both above it when there is none below)."""
    from signfree.chebyshev import candidate_degrees
    n = len(density.q) if density.kind == "slopes" else len(density.log_density_points()[0])
    degrees = candidate_degrees(density.kind, n, model.parity)
    if model.degree not in degrees:
        return []
    i = degrees.index(model.degree)
    below = degrees[i - 1:i] if i > 0 else []
    above = degrees[i + 1:i + 3 - len(below)]
    return below + above


def convergence_radius(model, mus, digits=6):
    """(radius, notes): the distance from 0 to the nearest zero of the model's
    Z inside the square |Re mu|, |Im mu| <= 1.05 max |mu| (which contains
    every requested mu), or infinity when that square holds no zero (the
    series then converges at every requested mu)."""
    from signfree.zeros import ContourError, count_zeros, find_zeros
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


def _cumulant_source(data, density, model, order):
    """(kappa, kappa_err or None, source description)."""
    from signfree.cumulants import (histogram_cumulant_errors, histogram_cumulants,
                                    model_cumulants, sample_cumulants)
    from signfree.samples import Samples
    if isinstance(data, Samples):
        sc = sample_cumulants(data, order)
        return sc.kappa, sc.kappa_err, (f"samples (k-statistics, blocked jackknife, block "
                                        f"size {sc.block_size})")
    if density.kind == "histogram":
        return (histogram_cumulants(density, order), histogram_cumulant_errors(density, order),
                "histogram counts")
    return model_cumulants(model, order), None, f"density of {model.label}"


def compare(density, mus, digits=12, max_cumulant_order=8, radius="auto"):
    """Every route to Z(mu)/Z(0) for a density (or raw :class:`Samples`,
    which are binned for the smoothings), as a :class:`Comparison`.
    ``radius``: the convergence radius of the cumulant series, or 'auto' to
    take it from the zeros of the chosen Chebyshev model."""
    from signfree.analysis import analyse
    from signfree.chebyshev import fit_chebyshev
    from signfree.cumulants import CumulantModel, cumulant_rows
    from signfree.engine import as_fractions
    from signfree.samples import Samples, density_from_samples

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
    for degree in [chosen.degree] + _neighbour_degrees(density, chosen):
        result = analyse(density, mus, model="chebyshev", degree=degree, digits=digits,
                         parity=chosen.parity)
        routes[result.model.label] = result.table.rows
    reference = chosen.label
    top = max_cumulant_order - max_cumulant_order % 2
    kappa, kappa_err, source = _cumulant_source(data, density, chosen, top + 2)
    if radius == "auto":
        radius, zero_notes = convergence_radius(chosen, mus)
        notes.extend(zero_notes)
    for K in range(2, top + 1, 2):
        cm = CumulantModel(kappa=tuple(kappa), order=K,
                           kappa_err=None if kappa_err is None else tuple(kappa_err),
                           parity=chosen.parity)
        nxt = cm.next_order_model()
        routes[cm.label] = cumulant_rows(cm, nxt, mus, radius=radius, digits=digits)
    pw = analyse(density, mus, model="piecewise", digits=digits)
    routes["piecewise"] = pw.table.rows
    info = {"cumulants_from": source, "notes": notes,
            "kappa": [mpmath.nstr(k, 15) for k in kappa],
            "kappa_err": None if kappa_err is None else [f"{e:.3g}" for e in kappa_err],
            "degree_criterion": fit.criterion, "parity": chosen.parity,
            "seconds": round(time.perf_counter() - start, 3)}
    return Comparison(mus=mus, routes=routes, reference=reference, radius=radius, info=info)


# ------------------------------------------------------------- command line

def add_compare_parser(subparsers):
    """The ``compare`` subcommand: signfree compare INPUT --mu SPEC [--out DIR]."""
    p = subparsers.add_parser("compare", help="Chebyshev, cumulant and piecewise routes side "
                              "by side, and where they agree")
    p.add_argument("input", help="CSV file (kind slopes, log_density, histogram or samples)")
    p.add_argument("--mu", required=True, metavar="SPEC",
                   help="mu values: a comma list (0.1,0.5,1) or start:stop:count")
    p.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    p.add_argument("--digits", type=int, default=12,
                   help="significant digits wanted (default 12)")
    p.add_argument("--max-order", type=int, default=8, dest="max_order",
                   help="highest cumulant order (default 8)")
    from signfree.cli import add_input_options
    add_input_options(p, symmetry=False)
    p.set_defaults(handler=cmd_compare)
    return p


def compare_files(args):
    """Read and compare, and prepare compare.csv and summary.json; raises
    InputError or ValueError on bad input before anything is written."""
    from signfree.analysis import check_digits, parse_mu_spec
    from signfree.output import csv_text, file_sha256, json_text, package_versions
    from signfree.samples import read_any

    digits = check_digits(getattr(args, "digits", 12))
    max_order = getattr(args, "max_order", 8)
    if max_order < 2 or max_order > 40:
        raise ValueError(f"--max-order {max_order}: expected 2 to 40")
    mus = parse_mu_spec(args.mu)
    data = read_any(args.input, kind=getattr(args, "kind", None))
    result = compare(data, mus, digits=digits, max_cumulant_order=max_order)
    summary = {
        "input": {"file": str(args.input), "sha256": file_sha256(args.input),
                  "kind": data.kind, "metadata": data.metadata},
        "mu": {"spec": args.mu, "count": len(mus)},
        "reference": result.reference,
        "routes": list(result.routes),
        "radius": None if result.radius is None else mpmath.nstr(result.radius, 12),
        **result.info,
        "verdicts": result.verdicts(),
        "versions": package_versions(),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    files = {"compare.csv": csv_text(COLUMNS, result.records()),
             "summary.json": json_text(summary)}
    return result, files


def cmd_compare(args, out=None):
    """Run ``signfree compare``; returns the exit status (2 on bad input,
    with one line on stderr and nothing written)."""
    from signfree.errors import InputError
    from signfree.output import new_folder_name, write_files
    out = out or sys.stdout
    try:
        result, files = compare_files(args)
    except (InputError, ValueError) as exc:
        sys.stderr.write(f"signfree: {exc}\n")
        return 2
    folder = write_files(Path(args.out) if args.out else new_folder_name("signfree-compare"),
                         files)
    print(result.text(), file=out)
    print(f"wrote {folder / 'compare.csv'} and {folder / 'summary.json'}", file=out)
    return 0
