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

The command ``signfree report INPUT --mu SPEC [--reference FILE] [--out DIR]``
writes report.html, results.csv, summary.json and fig_<name>.png / .pdf
into one folder, atomically (:func:`signfree.output.write_files`).
"""
import base64
import html
import io
import json
import math
import sys
from fractions import Fraction
from pathlib import Path

import matplotlib
import mpmath
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle

OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "purple": "#CC79A7",
}
_C = OKABE_ITO
GREY = "#8C8C8C"
COLUMN_WIDTH = 3.4  # inches: one column of a two-column journal page
PNG_DPI = 200

STYLE = {
    "figure.figsize": (COLUMN_WIDTH, 2.5),
    "figure.dpi": 100,
    "figure.constrained_layout.use": True,
    "figure.facecolor": "white",
    "savefig.dpi": PNG_DPI,
    "savefig.facecolor": "white",
    "font.size": 8,
    "axes.labelsize": 8,
    "axes.titlesize": 8,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "legend.title_fontsize": 8,
    "font.family": "DejaVu Sans",
    "mathtext.fontset": "dejavusans",
    "axes.formatter.use_mathtext": True,
    "axes.prop_cycle": matplotlib.cycler(color=[
        _C["blue"], _C["orange"], _C["green"], _C["vermillion"], _C["purple"],
        _C["sky_blue"], _C["black"], _C["yellow"]]),
    "axes.linewidth": 0.6,
    "lines.linewidth": 1.0,
    "lines.markersize": 3,
    "errorbar.capsize": 0,
    "xtick.direction": "in",
    "ytick.direction": "in",
    "xtick.top": True,
    "ytick.right": True,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.minor.width": 0.4,
    "ytick.minor.width": 0.4,
    "xtick.major.size": 3,
    "ytick.major.size": 3,
    "legend.frameon": False,
    "legend.handlelength": 1.6,
    "legend.borderaxespad": 0.3,
    "legend.labelspacing": 0.3,
    "pdf.fonttype": 42,
    "ps.fonttype": 42,
}

# How each status other than ok is marked (marker shape and colour both
# differ, so the marks stay apart in grey print as well). A filled mark is a
# value with supported digits; an open one a row without a single supported
# digit, drawn at its bound (|value| + total error, the bound cancel_orders
# reports).
STATUS_MARKS = {
    "edge_limited": {"marker": "s", "color": _C["vermillion"]},
    "noise_limited": {"marker": "D", "color": _C["purple"]},
    "unresolved": {"marker": "X", "color": _C["black"]},
}

STATUS_TEXT = {
    "ok": "the total error is below |Z(mu)/Z(0)| and edge_err below 10% of it.",
    "edge_limited": "edge_err is at least 10% of |Z(mu)/Z(0)|, or the errors reach the value "
                    "only when added up and edge_err is the largest: the finite q range of "
                    "the data may hide a contribution comparable to the value.",
    "noise_limited": "the statistical error avg_phase_err is at least |Z(mu)/Z(0)|, or the "
                     "errors reach the value only when added up and the statistical error is "
                     "the largest: the measured data do not determine the value.",
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
    ("model_err", "Smoothing (truncation) error: the largest difference between Z(mu)/Z(0) "
     "of the chosen model and of its neighbours (the next Chebyshev degrees, or the "
     "piecewise reconstruction at half the resolution)."),
    ("edge_err", "What the finite q range of the data can hide: the endpoint terms "
     "rho(b) / |d ln rho/dq(b) + i mu| at both ends, relative to Z(0)."),
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
     "for the same relative error, about 1 / (r^2 |Z(mu)/Z(0)|^2) for relative error r."),
    ("horizon", "The largest mu of the scan up to which every value is resolved and stays "
     "at least two total errors away from zero, with the error source that ends it."),
]


# ---------------------------------------------------------------------------
# numbers

def _log10_abs(x):
    """log10 |x| as a float, taken in mpmath (x may lie below 1e-308); nan
    for zero."""
    x = abs(mpmath.mpmathify(x))
    if x == 0:
        return math.nan
    return float(mpmath.log10(x))


def _to_float(x):
    if isinstance(x, str):
        return float(Fraction(x.strip()))
    return float(x)


def _dec(s):
    """A decimal string of a record as mpf; None when empty."""
    s = (s or "").strip()
    return mpmath.mpf(s) if s else None


def _reference_points(reference):
    """Sorted (mu, log10 |value|) pairs from a dict or a list of pairs."""
    if reference is None:
        return []
    items = reference.items() if hasattr(reference, "items") else reference
    out = [(_to_float(mu), _log10_abs(v)) for mu, v in items]
    return sorted(out)


def horizon(table):
    """(mu, depth, label) of the horizon: the table's own when it states one
    (info['horizon'], a dict with keys mu, cancel_orders and reason), else
    the last ok mu; None when the table states that no mu is resolved, or
    when no row is ok."""
    h = table.info.get("horizon") if table.info else None
    if isinstance(h, dict):
        if h.get("mu") in (None, ""):
            return None
        depth = h.get("cancel_orders")
        depth = None if depth in (None, "") else _to_float(depth)
        return _to_float(h["mu"]), depth, "horizon"
    ok = [r for r in table.rows if r.status == "ok"]
    if not ok:
        return None
    last = max(ok, key=lambda r: abs(r.mu))
    return float(last.mu), float(last.cancel_orders), "last ok"


def horizon_text(table):
    """One sentence on where the signal is lost, for the report page."""
    h = table.info.get("horizon") if table.info else None
    found = horizon(table)
    if isinstance(h, dict):
        lost, reason = h.get("first_lost_mu"), h.get("reason")
        if found is None:
            text = "horizon: no mu of the scan is resolved two standard errors away from zero"
        else:
            text = f"horizon: signal up to mu = {found[0]:g}"
            if found[1] is not None:
                text += f" ({found[1]:.1f} orders cancelled)"
        if lost not in (None, ""):
            text += f"; lost at mu = {_to_float(lost):g}"
        if reason:
            text += f" (limited by {reason})"
        naive = h.get("naive_samples_log10")
        if found is not None and naive not in (None, ""):
            text += (f"; direct reweighting would need about 1e{_to_float(naive):.0f} "
                     "phase-quenched samples for the same accuracy there")
        return text + "."
    if found is None:
        return "no mu of the scan has the status ok."
    return f"last ok mu = {found[0]:g} ({found[1]:.1f} orders cancelled)."


# ---------------------------------------------------------------------------
# figures

def _new_figure(height):
    return Figure(figsize=(COLUMN_WIDTH, height))


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


def fit_figure(analysis):
    """The data with the model and the normalised residuals, sharing q.
    ln rho is drawn with its maximum on the data range set to 0 (it is
    known only up to a constant)."""
    density, model, table = analysis.density, analysis.model, analysis.table
    a, b = model.domain
    qq = np.linspace(a, b, 801)
    label = str(getattr(model, "label", None) or table.info.get("model", "model"))
    dof = getattr(model, "dof", 0) or 0
    top = float(np.max(model.log_density(qq)))
    legend = {"title": _chi2_text(model, table) or None, "loc": "best"}
    if density.kind == "slopes":
        from signfree.density import slope_knots
        fig = _new_figure(3.9)
        ax_s, ax_p, ax_r = fig.subplots(3, 1, sharex=True,
                                        gridspec_kw={"height_ratios": [1.25, 1.0, 0.9]})
        q, w, y, e = density.q, density.width, density.value, density.error
        fitted = (model.log_density(q + w / 2) - model.log_density(q - w / 2)) / w
        ax_s.errorbar(q, y, yerr=e, fmt="o", ms=2, elinewidth=0.6, color=_C["blue"],
                      label="measured", gid="data", zorder=2)
        ax_s.plot(qq, model.derivative(qq), color=_C["orange"], label=label, zorder=3)
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


def _outside_legend(fig, ax, ncols=2):
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="outside lower center", ncols=ncols,
                   columnspacing=1.0, handletextpad=0.5)


def phase_figure(table, reference=None):
    """log10 |Z(mu)/Z(0)| with its error band and the non-ok statuses."""
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
    band_lo = np.where(np.isfinite(lo), np.maximum(lo, floor), floor)
    band_hi = np.where(np.isfinite(hi), hi, floor)
    visible = bool(mu.size) and float(np.max(band_hi - band_lo)) > 0.005 * (top - floor)
    ax.fill_between(mu, band_lo, band_hi, color=_C["sky_blue"], alpha=0.35, lw=0,
                    label="± total error" if visible else None, zorder=1)
    for k, (a, b) in enumerate(table.sign_changes()):
        ax.axvspan(a, b, color=_C["green"], alpha=0.22, lw=0, zorder=0,
                   label="sign change" if k == 0 else None)
    line = np.where(supported, y, np.nan)
    ax.plot(mu, line, "-o", ms=1.8, color=_C["blue"], label=r"$|Z(\mu)/Z(0)|$", gid="value",
            zorder=3)
    if ref:
        ax.plot([m for m, _ in ref], [v for _, v in ref], "--", color=_C["orange"], lw=1.0,
                label="reference", gid="reference", zorder=4)
    _status_marks(ax, mu, y, status, supported, "open: no digit, upper bound")
    ax.set_xlabel(r"$\mu$")
    ax.set_ylabel(r"$\log_{10}|Z(\mu)/Z(0)|$")
    ax.set_ylim(floor, top + max(0.5, 0.04 * (top - bottom)))
    if mu.size > 1:
        ax.set_xlim(mu.min(), mu.max())
    _outside_legend(fig, ax)
    return fig


def _status_marks(ax, x, y, status, supported, bound_label):
    """Marks for the non-ok rows (filled: digits supported; open: drawn at
    the bound), and one legend entry explaining the open marks."""
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
    if any_bound:
        ax.plot([], [], ls="none", marker="o", ms=4, mew=0.8, color=GREY, mfc="white",
                label=bound_label)


def depth_figure(table):
    """D(mu) = -log10 |Z(mu)/Z(0)| beside -log10(total error), with the
    horizon."""
    fig = _new_figure(2.9)
    ax = fig.subplots()
    mu = np.array([float(r.mu) for r in table.rows])
    depth = np.array([r.cancel_orders for r in table.rows])
    status = [r.status for r in table.rows]
    supported = np.array([_supported(r) for r in table.rows], dtype=bool)
    err_depth = np.array([-_log10_abs(r.total_err) if r.total_err > 0 else math.nan
                          for r in table.rows])
    line = np.where(supported, depth, np.nan)
    ax.plot(mu, line, "-o", ms=1.8, color=_C["blue"], label=r"$D(\mu)$", gid="depth", zorder=3)
    ax.plot(mu, err_depth, "--", color=_C["orange"], label=r"$-\log_{10}$(total error)",
            gid="error_depth", zorder=2)
    _status_marks(ax, mu, depth, status, supported, "open: no digit, lower bound")
    h = horizon(table)
    if h is not None:
        hmu, hdepth, kind = h
        hinfo = table.info.get("horizon") if table.info else None
        if isinstance(hinfo, dict) and hinfo.get("reason") == "end of scan":
            text = r"signal to the end of the scan"
        else:
            text = r"%s $\mu$ = %.4g" % (kind, hmu)
        if hdepth is not None:
            text += ", $D$ = %.3g" % hdepth
        ax.axvline(hmu, color=_C["black"], ls=":", lw=0.9, label=text, gid="horizon")
    ax.set_xlabel(r"$\mu$")
    ax.set_ylabel(r"$D(\mu)=-\log_{10}|Z(\mu)/Z(0)|$")
    finite = [v for v in list(depth) + list(err_depth) if math.isfinite(v)]
    if finite:
        lo, hi = min(finite), max(finite)
        ax.set_ylim(min(0.0, lo) - 0.03 * (hi - lo + 1), hi + 0.06 * (hi - lo + 1))
    if mu.size > 1:
        ax.set_xlim(mu.min(), mu.max())
    _outside_legend(fig, ax)
    return fig


def _record_value(rec):
    re_, im_ = _dec(rec.get("avg_phase")), _dec(rec.get("avg_phase_imag"))
    if re_ is None:
        return None
    return mpmath.mpc(re_, im_ or 0)


def _record_error(rec):
    errs = [_dec(rec.get(k)) for k in ("avg_phase_err", "model_err")]
    return mpmath.sqrt(sum((e ** 2 for e in errs if e is not None), mpmath.mpf(0)))


def _unit_in_last_place(s):
    """Half a unit in the last printed digit of a decimal string: how
    finely the printed value is known."""
    s = (s or "").strip().lower()
    if not s:
        return mpmath.mpf(0)
    mant, _, exp = s.partition("e")
    decimals = len(mant.split(".")[1]) if "." in mant else 0
    return mpmath.mpf(10) ** (int(exp or 0) - decimals) / 2


UNCOMPARABLE = ("unresolved", "beyond_radius")


def comparison_deviations(comparison, chosen=None):
    """(reference label, {model: (mu list, deviation list, both-ok list)}):
    for every model other than the reference, |Z_model - Z_ref| in units
    of the combined error, signed by the real part of the difference. The
    combined error is total_err_model + total_err_ref when the records
    carry total_err (so |deviation| <= 1 is agreement within the errors),
    else the quadrature sum of avg_phase_err and model_err of both; never
    below half a unit in the last digit printed. Rows where either side has
    no supported digit, is unresolved or lies beyond the convergence radius
    are left out. The reference is the comparison's own (``.reference``),
    else ``chosen``, else the first model."""
    by_model = _by_model(comparison)
    chosen = getattr(comparison, "reference", None) or chosen
    if not by_model:
        return chosen, {}
    if chosen not in by_model:
        base = str(chosen).split(":")[0]
        chosen = next((m for m in by_model if m.split(":")[0] == base), next(iter(by_model)))
    central = {rec["mu"]: rec for rec in by_model[chosen]}
    out = {}
    for model, recs in by_model.items():
        if model == chosen:
            continue
        mus, devs, oks = [], [], []
        for rec in recs:
            other = central.get(rec["mu"])
            if other is None or rec.get("status") in UNCOMPARABLE or \
                    other.get("status") in UNCOMPARABLE:
                continue
            z1, z0 = _record_value(rec), _record_value(other)
            if z1 is None or z0 is None:
                continue
            floor1 = max(_unit_in_last_place(rec.get("avg_phase")),
                         _unit_in_last_place(rec.get("avg_phase_imag")))
            floor0 = max(_unit_in_last_place(other.get("avg_phase")),
                         _unit_in_last_place(other.get("avg_phase_imag")))
            t1, t0 = _dec(rec.get("total_err")), _dec(other.get("total_err"))
            if t1 is not None and t0 is not None:
                err = max(t1, floor1) + max(t0, floor0)
            else:
                e1 = max(_record_error(rec), floor1)
                e0 = max(_record_error(other), floor0)
                err = mpmath.sqrt(e1 ** 2 + e0 ** 2)
            if err == 0:
                continue
            d = z1 - z0
            sign = -1.0 if d.real < 0 else 1.0
            mus.append(_to_float(rec["mu"]))
            devs.append(sign * float(abs(d) / err))
            oks.append(rec.get("status") == "ok" and other.get("status") == "ok")
        order = np.argsort(mus)
        out[model] = ([mus[i] for i in order], [devs[i] for i in order],
                      [oks[i] for i in order])
    return chosen, out


def _by_model(comparison):
    out = {}
    for rec in comparison.records():
        out.setdefault(str(rec.get("model", "")), []).append(rec)
    return out


COMPARE_COLOURS = [_C["orange"], _C["green"], _C["vermillion"], _C["purple"], _C["sky_blue"],
                   _C["black"], _C["yellow"]]
COMPARE_MARKERS = ["s", "D", "^", "p", "h", "*", "X", "P"]
COMPARE_LINESTYLES = {"chebyshev": "-", "cumulant": "--", "piecewise": "-."}


def compare_figure(comparison, chosen=None):
    """log10 |Z(mu)/Z(0)| of every model on one panel (filled: ok; open:
    edge or noise limited; open triangles: upper bounds where not one digit
    is supported; rows beyond the convergence radius of a series are not
    drawn), the
    legend giving each model's largest deviation from the reference in
    units of the combined error. The logarithm shows where the models part
    and where each loses the signal over any number of decades; the
    deviation says whether they agree where both have digits."""
    chosen, devs = comparison_deviations(comparison, chosen)
    models = _by_model(comparison)
    order = ([chosen] if chosen in models else []) + [m for m in models if m != chosen]
    fig = _new_figure(2.4 + 0.075 * (len(order) + 3))
    ax = fig.subplots()
    beyond = False
    handles, labels, shown, bounds = [], [], [], []
    for k, model in enumerate(order):
        recs = sorted(models[model], key=lambda r: _to_float(r["mu"]))
        mu = np.array([_to_float(r["mu"]) for r in recs])
        y = np.array([-_to_float(r["cancel_orders"]) if r.get("cancel_orders") not in
                      (None, "") else math.nan for r in recs])
        status = [r.get("status", "") for r in recs]
        if model == chosen:
            colour, marker, label = _C["blue"], "o", f"{model} (ref.)"
        else:
            colour = COMPARE_COLOURS[(k - 1) % len(COMPARE_COLOURS)]
            marker = COMPARE_MARKERS[(k - 1) % len(COMPARE_MARKERS)]
            d = devs.get(model, ([], [], []))[1]
            label = f"{model}: " + ("%.2g" % max(abs(v) for v in d) if d else "n/a")
        drawn = np.array([t != "beyond_radius" for t in status], dtype=bool)
        digit = np.array([bool((r.get("avg_phase") or "").strip()) for r in recs], dtype=bool)
        resolved = drawn & digit
        unresolved = drawn & ~digit  # no supported digit: cancel_orders is a bound
        beyond |= not drawn.all()
        ok = np.array([t == "ok" for t in status], dtype=bool)
        line = np.where(resolved, y, np.nan)
        lw = 1.2 if model == chosen else 0.8
        ls = COMPARE_LINESTYLES.get(model.split(":")[0], ":")
        ax.plot(mu, line, ls=ls, color=colour, lw=lw, zorder=4 if model == chosen else 3,
                gid=f"model:{model}")
        handles.append(Line2D([], [], color=colour, lw=lw, ls=ls, marker=marker, ms=3))
        labels.append(label)
        shown += [v for v in line if math.isfinite(v)]
        bounds += [v for v in y[unresolved] if math.isfinite(v)]
        ax.plot(mu[ok], y[ok], ls="none", marker=marker, ms=2.6, color=colour, zorder=4)
        limited = resolved & ~ok
        if limited.any():
            ax.plot(mu[limited], y[limited], ls="none", marker=marker, ms=3, mfc="none",
                    mew=0.7, color=colour, zorder=4)
        if unresolved.any():
            ax.plot(mu[unresolved], y[unresolved], ls="none", marker="v", ms=3, mfc="none",
                    mew=0.7, color=colour, zorder=4)
    # |Z(mu)/Z(0)| <= 1 for real mu: upper bounds above 1 (a truncated
    # series can grow without limit) are left above the axes
    if shown:
        lo, hi = min(shown + bounds), max(max(shown), 0.0)
        pad = max(0.5, 0.05 * (hi - lo))
        ax.set_ylim(lo - pad, hi + pad)
    radius = getattr(comparison, "radius", None)
    if radius is not None and mpmath.isfinite(radius):
        r = float(radius)
        lo, hi = ax.get_xlim()
        if lo <= r <= hi:
            handles.append(ax.axvline(r, color=GREY, ls=":", lw=0.9, gid="radius"))
            labels.append("convergence radius")
    ax.set_xlabel(r"$\mu$")
    ax.set_ylabel(r"$\log_{10}|Z(\mu)/Z(0)|$")
    handles += [Line2D([], [], ls="none", marker="o", mfc="none", color=GREY, ms=3),
                Line2D([], [], ls="none", marker="v", mfc="none", color=GREY, ms=3)]
    labels += ["edge/noise limited", "upper bound"]
    title = r"largest $|Z-Z_\mathrm{ref}|$ / combined error"
    if beyond:
        title += "\n(rows beyond the convergence radius not drawn)"
    ncols = 2 if max(len(t) for t in labels) <= 21 else 1
    fig.legend(handles, labels, loc="outside lower center", ncols=ncols, columnspacing=0.8,
               handlelength=1.8, handletextpad=0.4, title=title)
    return fig


def zeros_figure(zeros):
    """Zeros of Z(mu) in the complex mu plane with the searched box and,
    when known, the circle |mu| = radius out to which the cumulant series
    of ln Z converges (the distance to the nearest zero). Open symbols:
    Newton's iteration did not converge; a multiplicity above 1 is
    written beside its zero."""
    fig = _new_figure(2.9)
    ax = fig.subplots()
    items = list(getattr(zeros, "zeros", []) or [])
    box = getattr(zeros, "box", None)
    if box is not None:
        re0, re1, im0, im1 = map(float, box)
        ax.add_patch(Rectangle((re0, im0), re1 - re0, im1 - im0, fill=False, ls="--", lw=0.8,
                               ec=GREY, label="searched box"))
        pad_x, pad_y = 0.05 * (re1 - re0), 0.05 * (im1 - im0)
        ax.set_xlim(re0 - pad_x, re1 + pad_x)
        ax.set_ylim(im0 - pad_y, im1 + pad_y)
    radius = getattr(zeros, "radius", None)
    if radius is not None:
        t = np.linspace(0, 2 * np.pi, 721)
        r = float(radius)
        ax.plot(r * np.cos(t), r * np.sin(t), ":", color=_C["orange"], lw=0.9,
                label="cumulant convergence radius", gid="radius")
    if items:
        re_ = np.array([float(z.re) for z in items])
        im_ = np.array([float(z.im) for z in items])
        err = np.array([float(z.err) for z in items])
        done = np.array([bool(getattr(z, "converged", True)) for z in items])
        ax.errorbar(re_[done], im_[done], xerr=err[done], yerr=err[done], fmt="o", ms=3,
                    color=_C["blue"], elinewidth=0.7, label=r"zero of $Z(\mu)$", gid="zeros")
        if (~done).any():
            ax.errorbar(re_[~done], im_[~done], xerr=err[~done], yerr=err[~done], fmt="o",
                        ms=3.5, mfc="none", color=_C["vermillion"], elinewidth=0.7,
                        label="not converged", gid="zeros_unconverged")
        for z, x, y in zip(items, re_, im_):
            m = int(getattr(z, "multiplicity", 1) or 1)
            if m > 1:
                ax.annotate(f"×{m}", (x, y), xytext=(3, 3), textcoords="offset points",
                            fontsize=7)
        if box is None:
            ax.margins(0.15)
    else:
        ax.text(0.5, 0.5, "no zeros found", transform=ax.transAxes, ha="center", va="center")
    ax.axhline(0, color=GREY, lw=0.5, zorder=0)
    ax.set_xlabel(r"$\mathrm{Re}\,\mu$")
    ax.set_ylabel(r"$\mathrm{Im}\,\mu$")
    _outside_legend(fig, ax)
    return fig


def make_figures(analysis, reference=None, comparison=None, zeros=None):
    """{name: matplotlib Figure} for 'fit', 'phase', 'depth', and 'compare'
    and 'zeros' when those results are given. ``reference``: {Fraction(mu):
    mpf} or a list of (mu, value) to draw beside |Z(mu)/Z(0)|."""
    with matplotlib.rc_context(STYLE):
        figures = {
            "fit": fit_figure(analysis),
            "phase": phase_figure(analysis.table, reference),
            "depth": depth_figure(analysis.table),
        }
        if comparison is not None:
            figures["compare"] = compare_figure(comparison, analysis.table.info.get("model"))
        if zeros is not None:
            figures["zeros"] = zeros_figure(zeros)
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
    through :func:`signfree.output.write_files` (atomically)."""
    files = {}
    for name, fig in figures.items():
        files[figure_name(name, "png")] = _png(fig)
        files[figure_name(name, "pdf")] = _pdf(fig)
    if folder is not None:
        from signfree.output import write_files
        write_files(Path(folder), files)
    return files


def figures_files(analysis, reference=None):
    """The figure files of one run (for ``signfree run --plots``): name ->
    bytes, to be merged into the files given to write_files."""
    return write_figures(make_figures(analysis, reference))


# ---------------------------------------------------------------------------
# HTML

CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1a1a1a;
       margin: 0; background: #fafafa; line-height: 1.45; font-size: 15px; }
main { max-width: 1100px; margin: 0 auto; padding: 1.5em 2em 3em; background: #fff; }
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
figure img { width: 510px; max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.9em; color: #444; max-width: 510px; }
.scroll { overflow-x: auto; }
table { border-collapse: collapse; font-size: 0.85em; }
th, td { padding: 0.2em 0.6em; border-bottom: 1px solid #e4e4e4; text-align: right;
         white-space: nowrap; }
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
             "noise_limited; crosses: unresolved; open symbols: not one digit supported, "
             "drawn at the upper bound |value| + total error. Shaded columns bracket sign "
             "changes of Z(mu).",
    "depth": "The cancellation depth D(mu) = -log10 |Z(mu)/Z(0)| against -log10 of the total "
             "error: where D exceeds it, not one digit of the value is supported (open "
             "symbols, drawn at the lower bound -log10(|value| + total error)). The dotted "
             "line marks the horizon.",
    "compare": "log10 |Z(mu)/Z(0)| of every model compared (filled: ok; open: edge or noise "
               "limited; open triangles: upper bounds where not one digit is supported). The "
               "legend gives the "
               "largest deviation from the chosen model in units of the combined error "
               "(avg_phase_err and model_err of both models, and at least half a unit in the "
               "last printed digit) over the rows where both have digits.",
    "zeros": "Zeros of Z(mu) in the complex mu plane with their errors, the searched box and "
             "the circle out to which the cumulant series of ln Z converges (the distance to "
             "the nearest zero). Real zeros are sign changes of the phase factor.",
}


def _e(x):
    return html.escape("" if x is None else str(x), quote=True)


def _fmt(x):
    if x is None:
        return ""
    if isinstance(x, float):
        return f"{x:.6g}"
    if isinstance(x, (list, tuple)):
        return ", ".join(_fmt(v) for v in x)
    if isinstance(x, dict):
        return "; ".join(f"{k}: {_fmt(v)}" for k, v in x.items())
    return str(x)


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


def _table(columns, records, table_id, status_key="status"):
    head = "".join(f'<th scope="col" class="{"text" if c in TEXT_COLUMNS else "num"}">'
                   f'{_e(c)}</th>' for c in columns)
    body = []
    for rec in records:
        cells = []
        for c in columns:
            v = rec.get(c, "")
            cls = "text" if c in TEXT_COLUMNS else "num"
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
    lead = (f"{density.kind} data, {density.n_points} points on q in "
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
        ("parity", info.get("parity")),
        ("chi2 / dof", None if info.get("chi2_per_dof") is None else
         f"{info['chi2'] :.4g} / {info['dof']} = {info['chi2_per_dof']:.4g}"),
        ("degree criterion", info.get("degree_criterion")),
        ("fit consistent with the errors", info.get("fit_consistent")),
        ("errors estimated from residuals", info.get("errors_estimated_from_residuals")),
        ("parity test", info.get("parity_test")),
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
        caption = FIGURE_CAPTIONS.get(name, name)
        parts.append(f'<figure id="fig-{_e(name)}"><img src="{_png_data_uri(fig)}" '
                     f'alt="{_e(name)} figure" width="510">'
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
    parts.append("<p>As in results.csv; a dash marks an empty entry (no supported digit, or "
                 "an error that was not computed).</p>")
    parts.append(_table(columns, records, "results-table"))
    parts.append("</section>")

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
                 "(unresolved, noise_limited, edge_limited, ok):</p><dl class=\"terms\">")
    for status in ("ok", "edge_limited", "noise_limited", "unresolved"):
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


# ---------------------------------------------------------------------------
# command line

def add_report_parser(subparsers):
    """Add ``report INPUT --mu SPEC [--reference FILE] [--out DIR]`` (with
    the analysis options of ``run``) to an argparse subparsers object."""
    from signfree.cli import _add_analysis_options
    p = subparsers.add_parser("report", help="analyse one density file and write an HTML "
                              "report with figures")
    p.add_argument("input", help="CSV file (kind slopes, log_density or histogram)")
    _add_analysis_options(p)
    p.add_argument("--reference", metavar="FILE",
                   help="CSV with header mu,value: a known Z(mu)/Z(0) to draw beside the result")
    p.add_argument("--out", metavar="DIR", help="output folder (default: a new folder)")
    p.set_defaults(handler=cmd_report)
    return p


def _read_reference(path):
    from signfree.cli import read_reference
    try:
        return read_reference(path)
    except (OSError, ValueError, ZeroDivisionError, TypeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else exc
        raise ValueError(f"{path}: cannot read the reference (a CSV with header "
                         f"mu,value): {reason}") from None


def report_files(analysis, files, reference=None):
    """The files of ``signfree run`` (``files``: name -> text) plus the
    figures and report.html."""
    summary = json.loads(files["summary.json"]) if "summary.json" in files else {}
    figures = make_figures(analysis, reference)
    figure_bytes = write_figures(figures)
    pngs = {name: figure_bytes[figure_name(name, "png")] for name in figures}
    out = dict(files)
    out.update(figure_bytes)
    out["report.html"] = html_report(analysis, pngs, summary, reference=reference)
    return out


def cmd_report(args):
    """``signfree report``: exit status 0, or 2 with one line on stderr and
    nothing written on bad input."""
    from signfree.cli import run_files
    from signfree.errors import InputError
    from signfree.output import new_folder_name, write_files
    try:
        reference = _read_reference(args.reference) if args.reference else None
        result, files = run_files(args.input, args)
    except (InputError, ValueError) as exc:
        sys.stderr.write(f"signfree: {exc}\n")
        return 2
    files = report_files(result, files, reference)
    folder = write_files(Path(args.out) if args.out else new_folder_name("signfree-report"),
                         files)
    print(result.table.text(reference))
    counts = ", ".join(f"{v} {k}" for k, v in result.table.status_counts().items() if v)
    print(f"statuses: {counts}")
    print(f"wrote {folder / 'report.html'}, results.csv, summary.json and "
          f"{len(files) - 3} figure files in {folder}")
    return 0
