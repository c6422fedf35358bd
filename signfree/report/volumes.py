"""The figure of Delta f(mu) for several volumes with the infinite-volume
band, and the HTML page of a sweep (one section per group of volumes).

    files = volume_figure_files(limit, "beta = 2.0", "volumes_beta=2.0")
    page = sweep_page(result, ensemble_records, limits, notes, figures)
"""
import math

import matplotlib
import numpy as np

from signfree.analysis.volumes import LIMIT_STATUSES
from signfree.report.figures import write_figures
from signfree.report.page import CSS, TEXT_COLUMNS, _e, _png_data_uri, _table
from signfree.report.style import _C, GREY, STYLE, _new_figure, _outside_legend

WORDS = TEXT_COLUMNS + ("reason", "failure", "file", "ensemble", "outcome",
                        "horizon_reason")
VOLUME_COLOURS = [_C["blue"], _C["vermillion"], _C["green"], _C["purple"], _C["orange"],
                  _C["sky_blue"], _C["yellow"]]
MARKERS = ["o", "s", "^", "D", "v", "P", "X"]

LIMIT_TEXT = {
    "ok": "every volume's row is ok and the fit in 1/V is consistent with their errors "
          "(P(chi2) >= 0.05); the total error is fit_err + order_err.",
    "poor_fit": "no order of the fit in 1/V tried is consistent with the per-volume errors "
                "(P(chi2) < 0.05): corrections of another form, or errors that are too small.",
    "volume_not_ok": "the row of at least one volume is not ok at this mu (see its status).",
    "past_horizon": "mu lies past the horizon of at least one volume (usually the largest): "
                    "its signal is lost there, so the limit is not supported.",
    "volume_missing": "an ensemble of the group gave no result (it failed): the limit would "
                      "rest on fewer volumes than asked for.",
    "too_few_volumes": "fewer volumes than the fit needs (two, or the fixed order plus two).",
}

EXTRA_CSS = """
table[id^="limit-"] td.text:last-child { min-width: 30em; }
#ensembles-table td.text:nth-child(-n+2) { min-width: 8em; }
tr.status-poor_fit td { background: #f7ecf3; }
tr.status-volume_not_ok td, tr.status-past_horizon td { background: #fbeee6; }
tr.status-volume_missing td, tr.status-too_few_volumes td, tr.status-failed td {
  background: #ececec; }
"""


def _arrays(points):
    mu = np.array([float(p.mu) for p in points])
    y = np.array([np.nan if p.delta_f is None else p.delta_f for p in points])
    e = np.array([np.nan if p.err is None else p.err for p in points])
    ok = np.array([p.status == "ok" and not p.past_horizon for p in points])
    return mu, y, e, ok


def volume_figure(limit, title=""):
    """Two panels sharing mu: Delta f(mu) of every volume (filled: ok; open:
    not ok or past the volume's horizon) with the infinite-volume limit as a
    line and its total-error band over the ok rows (open squares elsewhere),
    and Delta f_V - Delta f_inf, the finite-size correction, against the band
    of the limit's error."""
    with matplotlib.rc_context(STYLE):
        fig = _new_figure(4.2)
        top, low = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [1.4, 1.0]})
        mu = np.array([float(r.mu) for r in limit.rows])
        f = np.array([np.nan if r.delta_f is None else r.delta_f for r in limit.rows])
        err = np.array([np.nan if r.total_err is None else r.total_err for r in limit.rows])
        good = np.array([r.status == "ok" for r in limit.rows])
        band_f = np.where(good, f, np.nan)
        band_e = np.where(good, err, np.nan)
        top.fill_between(mu, band_f - band_e, band_f + band_e, color=GREY, alpha=0.35, lw=0,
                         zorder=1)
        top.plot(mu, band_f, "-", color=_C["black"], lw=1.1, zorder=4, gid="limit",
                 label=r"$V\to\infty$ ($\pm$ total error)")
        low.fill_between(mu, -band_e, band_e, color=GREY, alpha=0.35, lw=0, zorder=1)
        low.axhline(0, color=_C["black"], lw=0.8, zorder=2)
        rest = ~good & np.isfinite(f)
        if rest.any():
            top.plot(mu[rest], f[rest], "s", ms=3.5, mfc="white", color=_C["black"], mew=0.7,
                     zorder=5, gid="limit:not_ok", label=r"$V\to\infty$, not ok")
        for i, v in enumerate(limit.volumes):
            colour, marker = VOLUME_COLOURS[i % 7], MARKERS[i % 7]
            m, y, e, ok = _arrays(limit.points[v])
            label = f"V = {v:g}"
            top.plot(m, y, "-", color=colour, lw=0.6, alpha=0.7, zorder=2)
            top.errorbar(m[ok], y[ok], yerr=e[ok], fmt=marker, ms=2.6, color=colour,
                         elinewidth=0.6, zorder=3, label=label, gid=f"volume:{v:g}")
            if (~ok & np.isfinite(y)).any():
                top.plot(m[~ok], y[~ok], marker, ms=2.6, mfc="white", color=colour, mew=0.6,
                         zorder=3)
            diff = y - f
            low.errorbar(m[ok], diff[ok], yerr=e[ok], fmt=marker, ms=2.6, color=colour,
                         elinewidth=0.6, zorder=3)
            if (~ok & np.isfinite(diff)).any():
                low.plot(m[~ok], diff[~ok], marker, ms=2.6, mfc="white", color=colour,
                         mew=0.6, zorder=3)
        top.set_ylabel(r"$\Delta f(\mu)$")
        low.set_ylabel(r"$\Delta f_V - \Delta f_\infty$")
        low.set_xlabel(r"$\mu$")
        if mu.size > 1:
            low.set_xlim(mu.min(), mu.max())
        if title:
            top.set_title(title)
        _zoom(low, limit, f)
        fig.align_ylabels()
        _outside_legend(fig, top, ncols=2)
    return fig


def _zoom(ax, limit, f):
    """Keep the correction panel on the scale of the ok points."""
    vals = [0.0]
    for v in limit.volumes:
        m, y, e, ok = _arrays(limit.points[v])
        vals += [x for x in (y - f)[ok] if math.isfinite(x)]
    lo, hi = min(vals), max(vals)
    pad = 0.08 * (hi - lo) or 1.0
    ax.set_ylim(lo - pad, hi + pad)


def volume_figure_files(limit, title, name):
    """{'fig_NAME.png': bytes, 'fig_NAME.pdf': bytes} of :func:`volume_figure`."""
    return write_figures({name: volume_figure(limit, title)})


# ---------------------------------------------------------------------------
# the page

def _wide_records(limit):
    """One row per mu: Delta f of each volume with its error and status, then
    the limit."""
    recs = limit.records()
    per_v = {v: [rec for rec in limit.point_records() if float(rec["volume"]) == v]
             for v in limit.volumes}
    out = []
    for k, rec in enumerate(recs):
        row = {"mu": rec["mu"]}
        for v in limit.volumes:
            p = per_v[v][k]
            text = f"{p['delta_f']} ± {p['delta_f_err']}" if p["delta_f"] else ""
            flag = p["status"] + (", past horizon" if p["past_horizon"] == "yes" else "")
            row[f"V = {v:g}"] = f"{text} ({flag})" if flag != "ok" else text
        row["V → ∞"] = f"{rec['delta_f']} ± {rec['total_err']}" if rec["delta_f"] else ""
        for c in ("fit_err", "order_err", "order", "chi2", "dof", "p_value", "status",
                  "reason"):
            row[c] = rec[c]
        out.append(row)
    return out


def _group_section(title, limit, note, figure, anchor):
    out = [f'<section id="{_e(anchor)}"><h2>{_e(title or "Infinite-volume limit")}</h2>']
    if note:
        out.append(f'<p class="note">{_e(note)}</p>')
    if limit is None:
        out.append("</section>")
        return "\n".join(out)
    counts = ", ".join(f"{n} {s}" for s, n in limit.status_counts().items() if n)
    h = limit.horizon()
    text = (f"volumes {', '.join(f'{v:g}' for v in limit.volumes)}; {counts}; "
            + ("no mu of the scan has an ok limit" if h is None else
               f"the limit is ok up to mu = {h:g}") + ". Order: " + limit.info["order_rule"] + ".")
    out.append(f"<p>{_e(text)}</p>")
    for v, why in limit.info.get("missing", []):
        out.append(f'<p class="note">{_e(f"no result for {v}: {why}")}</p>')
    if figure:
        png = next(data for key, data in figure.items() if key.endswith(".png"))
        out.append(f'<figure><img src="{_png_data_uri(png)}" alt="Delta f against mu for '
                   f'every volume" width="510"><figcaption>Delta f(mu) = -ln|Z(mu)/Z(0)|/V '
                   "for every volume (filled: ok; open: not ok or past the volume's "
                   "horizon) and the infinite-volume limit with its total-error band (grey, "
                   "over ok rows; open squares: a value that is not ok). Below: Delta f_V - "
                   "Delta f_inf, the finite-size correction.</figcaption></figure>")
    wide = _wide_records(limit)
    if wide:
        out.append(_table(list(wide[0]), wide, f"limit-{anchor}", text_columns=WORDS))
    out.append("</section>")
    return "\n".join(out)


def sweep_page(result, ensemble_records, limits, notes, figures):
    """One self-contained HTML page: the ensembles and their outcomes, and
    per group of volumes the figure and the table of the limit."""
    manifest = result.manifest
    labels = list(manifest.label_names)
    outcomes = list(result.outcomes.values())
    done = sum(1 for o in outcomes if o != "failed")
    earlier = sum(1 for o in outcomes if o == "skipped")
    failed = len(outcomes) - done
    title = f"signfree {manifest.command}: {manifest.source}"
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{_e(title)}</title>", f"<style>{CSS}{EXTRA_CSS}</style>", "</head>",
             "<body>", "<main>", f"<h1>{_e(title)}</h1>"]
    lead = (f"{len(outcomes)} ensembles: {done} analysed" +
            (f" ({earlier} in an earlier run)" if earlier else "") + f", {failed} failed; "
            f"mu = {result.mu_spec}; {len(limits)} group(s) of several volumes.")
    parts.append(f'<p class="lead">{_e(lead)}</p>')
    for name, why in result.failures.items():
        parts.append(f'<p class="note">{_e(f"{name} failed: {why}")}</p>')
    groups = list(limits) + [g for g in notes if g not in limits]
    for i, g in enumerate(groups):
        gtitle = ", ".join(f"{k} = {v}" for k, v in zip(labels, g))
        parts.append(_group_section(gtitle, limits.get(g), notes.get(g), figures.get(g),
                                    f"group-{i + 1}"))
    parts.append('<section id="ensembles"><h2>Ensembles</h2>')
    if ensemble_records:
        cols = list(ensemble_records[0]) + [c for c in ("model", "degree", "chi2_per_dof",
                                                        "horizon_mu", "horizon_reason",
                                                        "ok_rows", "rows")
                                            if c not in ensemble_records[0]]
        parts.append(_table(cols, ensemble_records, "ensembles-table", status_key="outcome",
                            text_columns=WORDS))
    parts.append("</section>")
    parts.append('<section id="method"><h2>How the limit is taken</h2><dl class="terms">')
    method = [
        ("Delta f_V", "-ln|Z(mu)/Z(0)| / V per volume; its error is the bound "
         "-ln(1 - e/|Z|)/V from the row's total error e (all sources added)."),
        ("fit", "per mu, weighted least squares in x = V_min/V: Delta f_V = f_inf + d_1 x + "
         "... + d_p x^p; the order p is the smallest whose chi2 is consistent with the "
         "errors, P(chi2) >= 0.05, unless fixed (--volume-order)."),
        ("fit_err", "sum of |weight| x error over the volumes (the per-volume errors "
         "include bounds that may be correlated), times sqrt(chi2/dof) when above 1."),
        ("order_err", "the change of f_inf when one more power of 1/V is fitted."),
    ]
    parts += [f"<dt>{_e(k)}</dt><dd>{_e(t)}</dd>" for k, t in method]
    parts.append("</dl><p>Status of a limit row, in order of precedence:</p>"
                 '<dl class="terms">')
    for s in reversed(LIMIT_STATUSES):
        parts.append(f"<dt>{_e(s)}</dt><dd>{_e(LIMIT_TEXT[s])}</dd>")
    parts += ["</dl></section>", "</main>", "</body>", "</html>", ""]
    return "\n".join(parts)

