"""Figures and a self-contained HTML report of one analysis.

    figures = make_figures(analysis, reference=exact)
    files = write_figures(figures)              # name -> PNG / PDF bytes
    page = html_report(analysis, figures, summary)

Figures (matplotlib, drawn without pyplot so that no global figure state
is kept):

  fit      the measured data with the smoothing model and the normalised
           residuals (data - model) / error on a shared q axis
  phase    log10 |Z(mu)/Z(0)| with its error band, non-ok statuses, sign
           changes and an optional reference curve
  depth    the cancellation depth D(mu) = -log10 |Z(mu)/Z(0)| against the
           depth at which the total error leaves no digit, with the horizon
  compare  log10 |Z(mu)/Z(0)| of several models on one panel, each with its
           largest deviation from the chosen one in units of the combined error
  zeros    zeros of Z(mu) in the complex mu plane, the searched box and the
           convergence radius of the cumulant series

|Z(mu)/Z(0)| falls far below the smallest double (1e-308), so every
logarithm is taken in mpmath before anything becomes a float. All figures
share one style (:data:`STYLE`, applied with ``matplotlib.rc_context``):
one journal column wide (3.4 in), 8 pt type and the Okabe-Ito colours,
which stay distinct under the common colour-vision deficiencies.

The compare and zeros figures are drawn in :mod:`signfree.report.routes`;
the page in :mod:`signfree.report.page`.
"""
import io
import math
from pathlib import Path

import matplotlib
import numpy as np

from signfree.report.routes import compare_figure, zeros_figure
from signfree.report.style import (GREY, PNG_DPI, STATUS_MARKS, STYLE, _C,
                                   _log10_abs, _new_figure, _outside_legend,
                                   _reference_points, field_symbol, horizon)


# ---------------------------------------------------------------------------
# figures

def _residual_panel(ax, q, resid, estimated):
    ax.axhspan(-1, 1, color=_C["sky_blue"], alpha=0.25, lw=0)
    ax.axhline(0, color=GREY, lw=0.6)
    ax.plot(q, resid, "o", ms=2, color=_C["blue"], gid="residuals")
    label = r"$(\mathrm{data}-\mathrm{model})/\hat\sigma$" if estimated else \
        r"$(\mathrm{data}-\mathrm{model})/\sigma$"
    ax.set_ylabel(label)
    ax.set_xlabel(r"$q$")
    finite = np.abs(resid[np.isfinite(resid)])
    top = max(2.5, 1.15 * float(finite.max())) if finite.size else 2.5
    ax.set_ylim(-top, top)


def _normalise(resid, error, dof):
    """Residuals in units of the stated errors, or of the noise estimated
    from their scatter when there are none."""
    if error is not None:
        return resid / error, False
    sigma = math.sqrt(float(resid @ resid) / max(dof, 1)) or 1.0
    return resid / sigma, True


def _chi2_text(model, table):
    """'chi2/dof = ...' of the fit that made the model, or ''."""
    chi2, dof = getattr(model, "chi2", math.nan), getattr(model, "dof", 0)
    if dof and math.isfinite(chi2):
        return r"$\chi^2/\mathrm{dof}$ = %.3g" % (chi2 / dof)
    value = (table.info or {}).get("chi2_per_dof")
    return "" if value is None else r"$\chi^2/\mathrm{dof}$ = %.3g" % value


def _drawn_model(analysis):
    """(model, label) drawn over the data: the analysis's own model, or for
    a cumulant series (which has no ln rho on the data range) the Chebyshev
    fit whose zeros set the series' radius of convergence."""
    model, table = analysis.model, analysis.table
    label = str(getattr(model, "label", None) or table.info.get("model", "model"))
    if getattr(model, "domain", None) is None and analysis.fit is not None:
        fitted = analysis.fit.model
        return fitted, f"{fitted.label} (radius of {label})"
    return model, label


def _model_slopes(ax, model, qq, label):
    """d ln rho/dq of the model: one horizontal segment per linear piece for
    the piecewise reconstruction (its derivative is constant on each piece),
    a curve otherwise."""
    knots = getattr(model, "knots", None)
    if knots is None:
        ax.plot(qq, model.derivative(qq), color=_C["orange"], label=label, zorder=3)
        return
    slopes = np.diff(model.values) / np.diff(knots)
    ax.hlines(slopes, knots[:-1], knots[1:], color=_C["orange"], lw=1.0, zorder=3,
              label=label)


def fit_figure(analysis):
    """The data with the model and the normalised residuals, sharing q.
    ln rho is drawn with its maximum on the data range set to 0 (it is
    known only up to a constant)."""
    density, table = analysis.density, analysis.table
    model, label = _drawn_model(analysis)
    a, b = model.domain
    qq = np.linspace(a, b, 801)
    dof = getattr(model, "dof", 0) or 0
    top = float(np.max(model.log_density(qq)))
    legend = {"title": _chi2_text(model, table) or None, "loc": "best"}
    fit = getattr(analysis, "fit", None)
    used = getattr(fit, "sigma", None)         # the errors the fit judged (pooled, estimated)
    if density.kind == "slopes":
        from signfree.density import slope_knots
        fig = _new_figure(3.9)
        ax_s, ax_p, ax_r = fig.subplots(3, 1, sharex=True,
                                        gridspec_kw={"height_ratios": [1.25, 1.0, 0.9]})
        q, w, y, e = density.q, density.width, density.value, density.error
        e = used if used is not None else e
        fitted = (model.log_density(q + w / 2) - model.log_density(q - w / 2)) / w
        ax_s.errorbar(q, y, yerr=e, fmt="o", ms=2, elinewidth=0.6, color=_C["blue"],
                      label="measured", gid="data", zorder=2)
        _model_slopes(ax_s, model, qq, label)
        ax_s.set_ylabel(r"$d\ln\rho/dq$")
        ax_s.legend(**legend)
        knots, lnrho, _ = slope_knots(q, w, y)
        shift = float(np.mean(model.log_density(knots) - lnrho))
        ax_p.plot(knots, lnrho + shift - top, "o", ms=1.6, color=_C["blue"],
                  label="integrated slopes")
        ax_p.plot(qq, model.log_density(qq) - top, color=_C["orange"], label=label)
        ax_p.set_ylabel(r"$\ln\rho$")
        ax_p.legend(loc="lower center")
        resid, estimated = _normalise(y - fitted, e, dof)
    else:
        fig = _new_figure(3.0)
        ax_p, ax_r = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [1.5, 1.0]})
        q, y, e = density.log_density_points()
        e = used if used is not None else e
        correction = getattr(fit, "correction", None)
        if correction is not None and density.kind == "histogram":
            y = y - np.asarray(correction)[density.value > 0]    # bin averages -> centres
        m = model.log_density(q)
        weight = np.ones_like(y) if e is None else 1.0 / np.asarray(e) ** 2
        offset = float(np.sum(weight * (y - m)) / np.sum(weight))
        what = "ln(count/width)" if density.kind == "histogram" else "measured"
        ax_p.errorbar(q, y - offset - top, yerr=e, fmt="o", ms=2, elinewidth=0.6,
                      color=_C["blue"], label=what, gid="data", zorder=2)
        ax_p.plot(qq, model.log_density(qq) - top, color=_C["orange"], label=label, zorder=3)
        ax_p.set_ylabel(r"$\ln\rho$")
        ax_p.legend(**dict(legend, loc="lower center"))
        resid, estimated = _normalise(y - offset - m, e, dof)
    _residual_panel(ax_r, q, resid, estimated)
    ax_r.set_xlim(a - 0.015 * (b - a), b + 0.015 * (b - a))
    fig.align_ylabels()
    return fig


def _supported(row):
    """True when the row's errors support at least its leading digit."""
    try:
        return row.last_digit is not None
    except AttributeError:  # a row type without last_digit
        return row.status != "unresolved"


def _phase_data(table):
    """Per row: mu, the plotted log10 |Z| (for a row without a supported
    digit the bound log10(|value| + total error), as cancel_orders
    reports it), whether a digit is supported, log10(|value| + err) and
    log10(|value| - err) (nan when the error reaches the value)."""
    mu, y, sup, hi, lo = [], [], [], [], []
    for r in table.rows:
        mag, err = r.magnitude, r.total_err
        mu.append(float(r.mu))
        up = _log10_abs(mag + err)
        ok = _supported(r)
        y.append(_log10_abs(mag) if ok else up)
        sup.append(ok)
        hi.append(up)
        lo.append(_log10_abs(mag - err) if mag > err else math.nan)
    return (np.array(mu), np.array(y), np.array(sup, dtype=bool), np.array(hi),
            np.array(lo))


def phase_figure(table, reference=None, field="mu"):
    """log10 |Z(mu)/Z(0)| with its error band and the non-ok statuses; rows
    without a supported digit are drawn as upper bounds (arrows down from
    log10(|value| + total error))."""
    sym = field_symbol(field)
    fig = _new_figure(3.0)
    ax = fig.subplots()
    mu, y, supported, hi, lo = _phase_data(table)
    status = [r.status for r in table.rows]
    ref = [(m, v) for m, v in _reference_points(reference)
           if mu.size and mu.min() - 1e-12 <= m <= mu.max() + 1e-12]
    own = [v for v in y if math.isfinite(v)]
    top = max(own) if own else 0.0
    bottom = min(own) if own else -1.0
    # a reference may sink much deeper (near a zero of Z): follow it only
    # part of the way, so that the scale stays set by the table
    deepest = bottom - max(5.0, 0.5 * (top - bottom))
    ref_low = [v for _, v in ref if math.isfinite(v)]
    if ref_low:
        bottom = min(bottom, max(min(ref_low), deepest))
        top = max(top, max(ref_low))
    floor = bottom - max(1.0, 0.06 * (top - bottom))
    ceiling = top + max(0.5, 0.04 * (top - bottom))
    band_lo = np.where(np.isfinite(lo), np.maximum(lo, floor), floor)
    band_hi = np.where(np.isfinite(hi), hi, floor)
    visible = bool(mu.size) and float(np.max(band_hi - band_lo)) > 0.005 * (top - floor)
    if mu.size > 2:
        ax.fill_between(mu, band_lo, band_hi, color=_C["sky_blue"], alpha=0.35, lw=0,
                        label="± total error" if visible else None, zorder=1)
    elif mu.size:
        # one or two mu: a band has no width, so the error is a bar
        pick = supported
        ax.errorbar(mu[pick], y[pick], yerr=[y[pick] - band_lo[pick], band_hi[pick] - y[pick]],
                    fmt="none", ecolor=_C["blue"], elinewidth=0.8, capsize=2.5, zorder=2,
                    label="± total error" if pick.any() else None, gid="error_bar")
    for k, (a, b) in enumerate(table.sign_changes()):
        ax.axvspan(a, b, color=_C["green"], alpha=0.22, lw=0, zorder=0,
                   label="sign change" if k == 0 else None)
    line = np.where(supported, y, np.nan)
    ax.plot(mu, line, "-o", ms=1.8, color=_C["blue"], label=r"$|Z(%s)/Z(0)|$" % sym,
            gid="value", zorder=3)
    if ref:
        ax.plot([m for m, _ in ref], [v for _, v in ref], "--", color=_C["orange"], lw=1.0,
                label="reference", gid="reference", zorder=4)
    _status_marks(ax, mu, y, status, supported, -0.08 * (ceiling - floor),
                  "no digit: upper bound")
    ax.set_xlabel(r"$%s$" % sym)
    ax.set_ylabel(r"$\log_{10}|Z(%s)/Z(0)|$" % sym)
    ax.set_ylim(floor, ceiling)
    _set_xlim(ax, mu)
    _outside_legend(fig, ax)
    return fig


def _set_xlim(ax, mu):
    """The scan's range, or a unit-wide window around a single mu."""
    if mu.size > 1 and mu.max() > mu.min():
        ax.set_xlim(mu.min(), mu.max())
    elif mu.size:
        ax.set_xlim(mu[0] - 0.5, mu[0] + 0.5)


def _status_marks(ax, x, y, status, supported, arrow, bound_label):
    """Marks for the non-ok rows: filled where digits are supported; open,
    with an arrow of length ``arrow`` (data units, negative: pointing down)
    where the row is only a bound; and one legend entry for the arrows."""
    any_bound = False
    for s, style in STATUS_MARKS.items():
        for sup in (True, False):
            pick = [k for k, t in enumerate(status) if t == s and supported[k] == sup]
            if not pick:
                continue
            any_bound |= not sup
            label = s if not any(t == s and supported[k] for k, t in enumerate(status)) \
                or sup else None
            ax.plot(x[pick], y[pick], ls="none", ms=4, mew=0.8, label=label,
                    mfc=style["color"] if sup else "white",
                    gid=f"status:{s}" + ("" if sup else ":bound"), zorder=5, **style)
            if not sup:
                size = [[-arrow if arrow < 0 else 0] * len(pick),
                        [arrow if arrow > 0 else 0] * len(pick)]
                ax.errorbar(x[pick], y[pick], yerr=size, fmt="none", ecolor=style["color"],
                            elinewidth=0.8, uplims=arrow < 0, lolims=arrow > 0, zorder=4,
                            gid=f"arrows:{s}")
    if any_bound:
        glyph = r"$\downarrow$" if arrow < 0 else r"$\uparrow$"
        ax.plot([], [], ls="none", marker=glyph, ms=7, color=GREY, label=bound_label)


def depth_figure(table, field="mu"):
    """D(mu) = -log10 |Z(mu)/Z(0)| beside -log10(total error), with the
    horizon; rows without a supported digit are lower bounds (arrows up).
    The error line leaves out mu = 0, where Z(0)/Z(0) = 1 holds by
    definition and the error is only the tiny edge term."""
    sym = field_symbol(field)
    fig = _new_figure(2.9)
    ax = fig.subplots()
    mu = np.array([float(r.mu) for r in table.rows])
    depth = np.array([np.nan if r.cancel_orders is None else r.cancel_orders for r in table.rows])
    status = [r.status for r in table.rows]
    supported = np.array([_supported(r) for r in table.rows], dtype=bool)
    err_depth = np.array([-_log10_abs(r.total_err) if r.total_err > 0 and r.mu != 0
                          else math.nan for r in table.rows])
    finite = [v for v in list(depth) + list(err_depth) if math.isfinite(v)]
    lo, hi = (min(finite), max(finite)) if finite else (0.0, 1.0)
    ylim = (min(0.0, lo) - 0.03 * (hi - lo + 1), hi + 0.16 * (hi - lo + 1))
    line = np.where(supported, depth, np.nan)
    ax.plot(mu, line, "-o", ms=1.8, color=_C["blue"], label=r"$D(%s)$" % sym, gid="depth",
            zorder=3)
    ax.plot(mu, err_depth, "--" if mu.size > 2 else "_", ms=8, color=_C["orange"],
            label=r"$-\log_{10}$(total error)", gid="error_depth", zorder=2)
    _status_marks(ax, mu, depth, status, supported, 0.08 * (ylim[1] - ylim[0]),
                  "no digit: lower bound")
    h = horizon(table)
    if h is not None:
        hmu, hdepth, kind = h
        hinfo = table.info.get("horizon") if table.info else None
        if isinstance(hinfo, dict) and hinfo.get("reason") == "end of scan":
            text = r"horizon: end of scan"
        else:
            text = r"%s $%s$ = %.4g" % (kind, sym, hmu)
        if hdepth is not None:
            text += ", $D$ = %.3g" % hdepth
        ax.axvline(hmu, color=_C["black"], ls=":", lw=0.9, label=text, gid="horizon")
    ax.set_xlabel(r"$%s$" % sym)
    ax.set_ylabel(r"$D(%s)=-\log_{10}|Z(%s)/Z(0)|$" % (sym, sym))
    ax.set_ylim(*ylim)
    _set_xlim(ax, mu)
    _outside_legend(fig, ax)
    return fig


def make_figures(analysis, reference=None, comparison=None, zeros=None, field="mu"):
    """{name: matplotlib Figure} for 'fit', 'phase', 'depth', and 'compare'
    and 'zeros' when those results are given. ``reference``: {Fraction(mu):
    mpf} or a list of (mu, value) to draw beside |Z(mu)/Z(0)|. ``field``:
    'mu' or 'theta', the symbol on the axes."""
    field_symbol(field)
    with matplotlib.rc_context(STYLE):
        figures = {
            "fit": fit_figure(analysis),
            "phase": phase_figure(analysis.table, reference, field=field),
            "depth": depth_figure(analysis.table, field=field),
        }
        if comparison is not None:
            figures["compare"] = compare_figure(comparison, analysis.table.info.get("model"),
                                                field=field)
        if zeros is not None:
            figures["zeros"] = zeros_figure(zeros, field=field)
    return figures


def _png(fig):
    buf = io.BytesIO()
    with matplotlib.rc_context(STYLE):
        fig.savefig(buf, format="png", dpi=PNG_DPI, metadata={"Software": None})
    return buf.getvalue()


def _pdf(fig):
    buf = io.BytesIO()
    with matplotlib.rc_context(STYLE):
        fig.savefig(buf, format="pdf", metadata={"CreationDate": None, "Creator": None,
                                                  "Producer": None})
    return buf.getvalue()


def figure_name(name, ext):
    return f"fig_{name}.{ext}"


def write_figures(figures, folder=None):
    """{'fig_<name>.png': bytes, 'fig_<name>.pdf': bytes} for every figure
    (PNG at 200 dpi). With ``folder`` the files are also written there
    through :func:`signfree.io.writing.write_files` (atomically)."""
    files = {}
    for name, fig in figures.items():
        files[figure_name(name, "png")] = _png(fig)
        files[figure_name(name, "pdf")] = _pdf(fig)
    if folder is not None:
        from signfree.io.writing import write_files
        write_files(Path(folder), files)
    return files


def figures_files(analysis, reference=None, field="mu"):
    """The figure files of one run (for ``signfree run --plots``): name ->
    bytes, to be merged into the files given to write_files."""
    return write_figures(make_figures(analysis, reference, field=field))


def compare_figures(comparison, field="mu"):
    """{'compare': Figure} of a :class:`signfree.analysis.compare.Comparison`
    (for ``signfree compare``)."""
    with matplotlib.rc_context(STYLE):
        return {"compare": compare_figure(comparison, field=field)}


def zeros_figures(zeros, field="mu"):
    """{'zeros': Figure} of a :class:`signfree.analysis.zeros.ZeroResult`
    (for ``signfree zeros``)."""
    with matplotlib.rc_context(STYLE):
        return {"zeros": zeros_figure(zeros, field=field)}
