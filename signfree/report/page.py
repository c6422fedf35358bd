"""The self-contained HTML report of one analysis: figures embedded as data
URIs, no network resources, the results table, the error budget, the
chosen model and the provenance.

    page = html_report(analysis, figures, summary)
"""
import base64
import html
import json
from fractions import Fraction
from pathlib import Path

import mpmath

from signfree.report.figures import _png, figure_name, make_figures, write_figures
from signfree.report.observables import CAPTIONS as OBSERVABLE_CAPTIONS
from signfree.report.observables import observable_figures, observables_section
from signfree.report.routes import comparison_deviations
from signfree.report.style import horizon_text


STATUS_TEXT = {
    "ok": "the total error is below |Z(mu)/Z(0)| and edge_err below 10% of it.",
    "edge_limited": "edge_err is at least 10% of |Z(mu)/Z(0)|, or the errors reach the value "
                    "only when added up and edge_err is the largest: the finite q range of "
                    "the data may hide a contribution comparable to the value.",
    "noise_limited": "the statistical error avg_phase_err is at least |Z(mu)/Z(0)|, or a "
                     "ripple in ln rho that the noise of the data cannot exclude could change "
                     "the value by as much (model_err), or the errors reach the value only "
                     "when added up and noise is the largest: the measured data do not "
                     "determine the value.",
    "misfit": "no smoothing degree fits the data within their errors (or the fit puts "
              "weight between the data points where they do not allow it): the value rests "
              "on a model the data reject and is shown only for inspection.",
    "unresolved": "the wanted digits were not reached within the precision and node limits, "
                  "or quad_err or model_err is at least |Z(mu)/Z(0)| (or is the largest of "
                  "errors that reach it together); cancel_orders is then only a lower bound, "
                  "-log10(|value| + total error).",
}

ERROR_TEXT = [
    ("quad_err", "Bound on the integration and rounding error of the Fourier integral of the "
     "chosen model: the ball radii of the high-precision arithmetic plus the change when the "
     "Gauss-Legendre rule is refined (a rigorous enclosure with --certify; exact segment "
     "sums for the piecewise model)."),
    ("model_err", "What the smoothing may get wrong: the larger of the structure bound (what a "
     "ripple in ln rho below the noise of the data could change) and the largest difference "
     "between Z(mu)/Z(0) of the chosen model and of its neighbours (the next Chebyshev "
     "degrees, or the "
     "piecewise reconstruction at half the resolution)."),
    ("edge_err", "What the finite q range of the data can hide: the tail beyond each end, "
     "continued from the last stretch of ln rho, at mu and in the normalisation Z(0)."),
    ("avg_phase_err", "Statistical error of Z(mu)/Z(0) from the errors of the measured data, "
     "by the method named under 'statistical errors' above (empty when none is computed)."),
    ("total error", "The sum of all errors that are known, a conservative combination. "
     "avg_phase and avg_phase_imag show only the digits this total supports; an empty "
     "entry means not even the leading digit is supported."),
    ("cancel_orders", "The cancellation depth D = -log10 |Z(mu)/Z(0)|: the number of "
     "decimal orders by which the sign-alternating integral cancels."),
    ("delta_f", "The free-energy density difference -ln|Z(mu)/Z(0)| / V (needs a volume), "
     "with its statistical error delta_f_err."),
    ("naive_samples", "The number of phase-quenched samples direct reweighting would need "
     "for the same error: (1 - |Z(mu)/Z(0)|^2) / (r^2 |Z(mu)/Z(0)|^2) for relative error r "
     "(the phase has variance 1 - |Z/Z0|^2), at least 1."),
    ("horizon", "The largest mu of the scan up to which every value is resolved and stays "
     "at least two total errors away from zero, with the error source that ends it."),
]


# ---------------------------------------------------------------------------
# HTML

CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1a1a1a;
       margin: 0; background: #fafafa; line-height: 1.45; font-size: 15px; }
main { max-width: 1100px; margin: 0 auto; padding: 1.5em 2em 3em; background: #fff;
       box-sizing: border-box; }
section { min-width: 0; }
h1 { font-size: 1.5em; margin-bottom: 0.2em; }
h2 { font-size: 1.2em; border-bottom: 1px solid #ddd; padding-bottom: 0.2em; margin-top: 2em; }
p.lead { color: #444; margin-top: 0; }
dl.kv { display: grid; grid-template-columns: max-content 1fr; gap: 0.2em 1.2em; }
dl.kv dt { font-weight: 600; }
dl.kv dd { margin: 0; }
dl.terms dt { font-weight: 600; font-family: ui-monospace, monospace; margin-top: 0.6em; }
dl.terms dd { margin-left: 1.5em; }
.figures { display: flex; flex-wrap: wrap; gap: 1.5em; }
figure { margin: 0; max-width: 100%; }
figure img { width: 490px; max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.9em; color: #444; max-width: 490px; }
.scroll { overflow-x: auto; max-width: 100%; }
#results .scroll { max-height: 32em; overflow-y: auto; }
table { border-collapse: collapse; font-size: 0.8em; }
th, td { padding: 0.2em 0.45em; border-bottom: 1px solid #e4e4e4; text-align: right;
         white-space: nowrap; }
th { white-space: normal; vertical-align: bottom; }
th { background: #f0f0f0; position: sticky; top: 0; }
td.text, th.text { text-align: left; white-space: normal; }
td.num { font-family: ui-monospace, "DejaVu Sans Mono", monospace; }
td.empty { color: #999; }
tr.status-edge_limited td { background: #fbeee6; }
tr.status-noise_limited td { background: #f7ecf3; }
tr.status-unresolved td, tr.status-beyond_radius td { background: #ececec; }
.note { background: #fff8e0; border-left: 3px solid #E69F00; padding: 0.3em 0.8em; }
code { font-family: ui-monospace, monospace; }
"""

FIGURE_CAPTIONS = {
    "fit": "The measured data with the smoothing model (for slopes also ln rho, from the "
           "model and from the cumulative sum of the measured slopes; ln rho is known up to a "
           "constant, set so that its maximum is 0), and the residuals (data - model) in "
           "units of the errors (the band marks one error).",
    "phase": "log10 |Z(mu)/Z(0)| with the band value ± total error (clipped at the bottom of "
             "the axes where the error reaches the value). Squares: edge_limited; diamonds: "
             "noise_limited; crosses: unresolved; open symbols with an arrow down: not one digit "
             "supported, drawn at the upper bound |value| + total error. Shaded columns "
             "bracket sign changes of Z(mu).",
    "depth": "The cancellation depth D(mu) = -log10 |Z(mu)/Z(0)| against -log10 of the total "
             "error (not drawn at mu = 0, where Z(0)/Z(0) = 1 by definition): where D exceeds "
             "it, not one digit of the value is supported (open symbols with an arrow up, "
             "drawn at the lower bound -log10(|value| + total error)). The dotted line marks "
             "the horizon.",
    "compare": "Upper panel: log10 |Z(mu)/Z(0)| of every route compared (filled: ok; open: "
               "edge or noise limited; open triangles: upper bounds where not one digit is "
               "supported). Lower panel: each route minus the chosen model in units of their "
               "combined error (the sum of both total errors, at least half a unit in the "
               "last printed digit), where both have digits; the shaded band |deviation| <= 1 "
               "is agreement. The legend gives each route's largest |deviation|.",
    "zeros": "Zeros of Z(mu) in the complex mu plane with their error discs, the searched "
             "box, the real axis and the disc in which the cumulant series of ln Z converges "
             "(out to the nearest zero). Open symbols with a dashed disc: zeros that the ends "
             "of the data range could move by that much, possibly artefacts of the range. "
             "Real zeros are sign changes of the phase factor.",
}


def _e(x):
    return html.escape("" if x is None else str(x), quote=True)


def _fmt(x):
    if x is None:
        return ""
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, float):
        return f"{x:.6g}"
    if isinstance(x, (list, tuple)):
        return ", ".join(_fmt(v) for v in x)
    if isinstance(x, dict):
        return "; ".join(f"{k}: {_fmt(v)}" for k, v in x.items())
    return str(x)


def parity_test_text(test):
    """The parity test of the fit in words, or None when none was made."""
    if not test:
        return None
    text = (f"{test.get('result', '?')}: {test.get('test', 'test')} at degree "
            f"{test.get('degree', '?')}")
    if test.get("delta_chi2") is not None:
        text += (f", delta chi2 = {test['delta_chi2']:.3g} for {test.get('delta_m', '?')} "
                 f"odd coefficients, p = {test.get('p', float('nan')):.3g}")
    return text


def _kv(pairs):
    items = "".join(f"<dt>{_e(k)}</dt><dd>{_e(_fmt(v))}</dd>" for k, v in pairs
                    if v not in (None, "", [], {}))
    return f'<dl class="kv">{items}</dl>'


TEXT_COLUMNS = ("status", "model", "agree", "part", "not compared")


def _lead_columns(columns, first=("model", "mu", "status")):
    """The identifying columns first (model, mu, status), then the rest in
    their own order."""
    lead = [c for c in first if c in columns]
    return lead + [c for c in columns if c not in lead]


def _table(columns, records, table_id, status_key="status", text_columns=TEXT_COLUMNS):
    head = "".join(f'<th scope="col" class="{"text" if c in text_columns else "num"}">'
                   f'{_e(c).replace("_", "_<wbr>")}</th>' for c in columns)
    body = []
    for rec in records:
        cells = []
        for c in columns:
            v = rec.get(c, "")
            cls = "text" if c in text_columns else "num"
            if v in ("", None):
                cells.append(f'<td class="{cls} empty">&ndash;</td>')
            else:
                cells.append(f'<td class="{cls}">{_e(v)}</td>')
        status = rec.get(status_key, "")
        attr = f' class="status-{_e(status)}"' if status else ""
        body.append(f'<tr{attr}>{"".join(cells)}</tr>')
    return (f'<div class="scroll"><table id="{_e(table_id)}"><thead><tr>{head}</tr></thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')


def _png_data_uri(fig):
    data = fig if isinstance(fig, (bytes, bytearray)) else _png(fig)
    return "data:image/png;base64," + base64.b64encode(bytes(data)).decode("ascii")


def _reference_strings(table, reference, records):
    """{row index: the reference value to one digit more than the row
    prints (3 to 12 significant digits)}."""
    if reference is None:
        return {}
    items = reference.items() if hasattr(reference, "items") else reference
    ref = {k if isinstance(k, Fraction) else Fraction(str(k)): v for k, v in items}
    out = {}
    for k, (r, rec) in enumerate(zip(table.rows, records)):
        v = ref.get(r.mu)
        if v is not None:
            mant = (rec.get("avg_phase") or "").split("e")[0].replace("-", "").replace(".", "")
            nsig = max(3, min(12, len(mant.lstrip("0")) + 1))
            with mpmath.workdps(30):
                out[k] = mpmath.nstr(mpmath.mpf(v), nsig, min_fixed=-4, max_fixed=6)
    return out


def _comparison_section(comparison, chosen):
    out = ['<section id="comparison"><h2>Model comparison</h2>']
    reference, devs = comparison_deviations(comparison, chosen)
    text = [f"reference: {reference}"]
    radius = getattr(comparison, "radius", None)
    if radius is not None:
        text.append("convergence radius of the cumulant series: "
                    + (mpmath.nstr(mpmath.mpf(radius), 6) if mpmath.isfinite(radius)
                       else "beyond the scan"))
    cinfo = getattr(comparison, "info", None) or {}
    if cinfo.get("cumulants_from"):
        text.append(f"cumulants from the {cinfo['cumulants_from']}")
    out.append(f"<p>{_e('; '.join(text))}.</p>")
    for note in cinfo.get("notes", []) or []:
        out.append(f'<p class="note">{_e(note)}</p>')
    if devs:
        rows = [{"model": m, "rows compared": str(len(d[1])),
                 "largest |deviation| / combined error":
                     "%.2g" % max(abs(v) for v in d[1]) if d[1] else ""}
                for m, d in devs.items()]
        out.append(_table(["model", "rows compared", "largest |deviation| / combined error"],
                          rows, "deviation-table"))
    if hasattr(comparison, "verdicts"):
        vrec = [{"mu": v["mu"], "agree": ", ".join(v.get("agree", [])),
                 "part": ", ".join(v.get("part", [])),
                 "not compared": ", ".join(f"{k} ({t})" for k, t in
                                           (v.get("skipped") or {}).items())}
                for v in comparison.verdicts()]
        out.append("<p>Agreement per mu: |Z_a - Z_b| within the sum of the two total "
                   "errors.</p>")
        out.append(_table(["mu", "agree", "part", "not compared"], vrec, "verdict-table"))
    crec = list(comparison.records())
    if crec:
        out.append(_table(_lead_columns(list(crec[0])), crec, "comparison-table"))
    out.append("</section>")
    return "\n".join(out)


def _zeros_section(zeros):
    zs = list(getattr(zeros, "zeros", []) or [])
    out = ['<section id="zeros"><h2>Zeros of Z(&mu;)</h2>']
    box = getattr(zeros, "box", None)
    text = []
    if box is not None:
        b = [f"{float(v):g}" for v in box]
        text.append(f"Searched box: Re mu in [{b[0]}, {b[1]}], Im mu in [{b[2]}, {b[3]}]")
    count = getattr(zeros, "count", None)
    text.append(f"{len(zs)} zero(s) refined" + ("" if count is None else
                                                f", {count} by the argument principle"))
    radius = getattr(zeros, "radius", None)
    if radius is not None:
        text.append(f"convergence radius of the cumulant series of ln Z: "
                    f"{mpmath.nstr(mpmath.mpf(radius), 8)}")
    elif getattr(zeros, "radius_lower_bound", None) is not None:
        text.append("convergence radius of the cumulant series: at least "
                    f"{mpmath.nstr(mpmath.mpf(zeros.radius_lower_bound), 6)}")
    out.append(f"<p>{_e('; '.join(text))}.</p>")
    for note in [getattr(zeros, "note", None)] + list(getattr(zeros, "notes", []) or []):
        if note:
            out.append(f'<p class="note">{_e(note)}</p>')
    if hasattr(zeros, "records"):
        recs = list(zeros.records())
        cols = list(getattr(zeros, "COLUMNS", None) or (recs[0] if recs else ()))
    else:
        cols = ["re", "im", "err"]
        recs = [{"re": f"{float(z.re):.10g}", "im": f"{float(z.im):.10g}",
                 "err": f"{float(z.err):.2g}"} for z in zs]
    if recs:
        out.append(_table(cols, recs, "zeros-table"))
    out.append("</section>")
    return "\n".join(out)


def html_report(analysis, figures, summary, comparison=None, zeros=None, reference=None):
    """One self-contained HTML page (figures as base64 PNG data URIs, inline
    CSS, no scripts): the figures, the results table, the chosen model and
    its fit quality, the error budget and statuses explained, and the
    provenance from ``summary`` (the run's summary.json as a dict).
    ``figures`` maps names to Figures or to PNG bytes."""
    table = analysis.table
    info = table.info or {}
    density = analysis.density
    summary = summary or {}
    inp = summary.get("input", {}) or {}
    source = inp.get("file") or getattr(density, "source", "")
    records = table.records()
    counts = table.status_counts()
    title = f"signfree report: {Path(str(source)).name or source}"
    mus = [float(r.mu) for r in table.rows]
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>", "<main>",
        f"<h1>Z(&mu;)/Z(0) from {_e(source)}</h1>",
    ]
    samples = getattr(analysis, "samples", None)
    what = (f"samples ({len(samples.q)} values binned into {density.n_points} bins)"
            if samples is not None else f"{density.kind} data, {density.n_points} points")
    lead = (f"{what} on q in "
            f"[{density.domain[0]:g}, {density.domain[1]:g}]; {len(mus)} values of mu"
            + (f" from {min(mus):g} to {max(mus):g}" if mus else "") + "; statuses: "
            + ", ".join(f"{v} {k}" for k, v in counts.items() if v) + ".")
    parts.append(f'<p class="lead">{_e(lead)}</p>')
    parts.append(f'<p class="lead">{_e(horizon_text(table))}</p>')
    for note in info.get("notes", []) or []:
        parts.append(f'<p class="note">{_e(note)}</p>')

    parts.append('<section id="model"><h2>Model and fit quality</h2>')
    parts.append(_kv([
        ("model", info.get("model")), ("degree", info.get("degree")),
        ("model choice", (info.get("model_choice") or {}).get("reason")),
        ("parity", info.get("parity")),
        ("chi2 / dof", None if info.get("chi2_per_dof") is None else
         f"{info['chi2'] :.4g} / {info['dof']} = {info['chi2_per_dof']:.4g}"),
        ("degree criterion", info.get("degree_criterion")),
        ("fit consistent with the errors", info.get("fit_consistent")),
        ("errors estimated from residuals", info.get("errors_estimated_from_residuals")),
        ("parity test", parity_test_text(info.get("parity_test"))),
        ("model_err against", info.get("model_err_against")),
        ("statistical errors", info.get("statistical_errors")),
        ("bootstrap seed", info.get("bootstrap_seed")),
        ("degrees tried", info.get("degrees_tried")),
        ("integration", info.get("integration")),
        ("working precision", None if info.get("precision_digits") is None else
         f"{info['precision_digits']} digits ({info.get('precision_bits')} bits)"),
        ("nodes", info.get("nodes")), ("domain", info.get("domain")),
        ("volume", table.volume),
    ]))
    parts.append("</section>")

    parts.append('<section id="figures"><h2>Figures</h2><div class="figures">')
    for name, fig in figures.items():
        caption = FIGURE_CAPTIONS.get(name) or OBSERVABLE_CAPTIONS.get(name, name)
        parts.append(f'<figure id="fig-{_e(name)}"><img src="{_png_data_uri(fig)}" '
                     f'alt="{_e(name)} figure" width="490">'
                     f"<figcaption><b>{_e(name)}.</b> {_e(caption)}</figcaption></figure>")
    parts.append("</div></section>")

    parts.append('<section id="results"><h2>Results</h2>')
    columns = list(records[0]) if records else list(table.COLUMNS)
    columns = _lead_columns(columns)
    refs = _reference_strings(table, reference, records)
    if refs:
        i = columns.index("avg_phase") + 1 if "avg_phase" in columns else len(columns)
        columns.insert(i, "reference")
        records = [dict(rec, reference=refs.get(k, "")) for k, rec in enumerate(records)]
    parts.append("<p>As in results.csv, with the values rounded to the digits their total "
                 "error supports (results.csv keeps two guard digits more, for further fits); "
                 "a dash marks an empty entry (no supported digit, or an error that was not "
                 "computed).</p>")
    parts.append(_table(columns, records, "results-table"))
    parts.append("</section>")

    parts.append(observables_section(analysis))
    if comparison is not None:
        parts.append(_comparison_section(comparison, info.get("model")))
    if zeros is not None:
        parts.append(_zeros_section(zeros))

    parts.append('<section id="errors"><h2>Error budget and statuses</h2>')
    parts.append("<p>All errors are absolute, on the scale of Z(&mu;)/Z(0), and can lie far "
                 "below 1e-308.</p><dl class=\"terms\">")
    for key, text in ERROR_TEXT:
        parts.append(f"<dt>{_e(key)}</dt><dd>{_e(text)}</dd>")
    parts.append("</dl><p>Status of each row, in order of precedence "
                 "(unresolved, misfit, noise_limited, edge_limited, ok):</p>"
                 "<dl class=\"terms\">")
    for status in ("ok", "edge_limited", "noise_limited", "misfit", "unresolved"):
        parts.append(f"<dt>{_e(status)}</dt><dd>{_e(STATUS_TEXT[status])} "
                     f"({counts.get(status, 0)} row(s))</dd>")
    parts.append("</dl></section>")

    parts.append('<section id="provenance"><h2>Provenance</h2>')
    versions = summary.get("versions") or {}
    parts.append(_kv([
        ("input file", source), ("input sha256", inp.get("sha256")),
        ("kind", inp.get("kind", density.kind)), ("points", inp.get("points")),
        ("replicas", inp.get("replicas")), ("errors", inp.get("errors")),
        ("metadata", inp.get("metadata")),
        ("mu", (summary.get("mu") or {}).get("spec")),
        ("digits wanted", summary.get("digits_wanted")),
        ("run seconds", summary.get("run_seconds")), ("created", summary.get("created")),
        ("versions", ", ".join(f"{k} {v}" for k, v in versions.items() if v)),
    ]))
    parts.append("</section>")
    parts += ["</main>", "</body>", "</html>", ""]
    return "\n".join(parts)


def report_files(analysis, files, reference=None, comparison=None, zeros=None, field="mu"):
    """The files of ``signfree run`` (``files``: name -> text) plus the
    figures and report.html; ``comparison`` (a Comparison) and ``zeros`` (a
    ZeroResult) add their sections and figures; ``field`` ('mu' or 'theta')
    names the axes."""
    summary = json.loads(files["summary.json"]) if "summary.json" in files else {}
    figures = make_figures(analysis, reference, comparison=comparison, zeros=zeros,
                           field=field)
    figures.update(observable_figures(analysis))
    figure_bytes = write_figures(figures)
    pngs = {name: figure_bytes[figure_name(name, "png")] for name in figures}
    out = dict(files)
    out.update(figure_bytes)
    out["report.html"] = html_report(analysis, pngs, summary, comparison=comparison,
                                     zeros=zeros, reference=reference)
    return out
