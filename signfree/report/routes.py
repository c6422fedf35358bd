"""Figures of the routes beside the chosen model: every route against it in
units of their combined error (``compare``), and the zeros of Z(mu) in the
complex mu plane with the searched box and the convergence disc (``zeros``).
"""
import math

import mpmath
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Circle, Ellipse, Rectangle
from matplotlib.ticker import FuncFormatter, NullLocator

from signfree.report.style import (GREY, _C, _dec, _new_figure, _outside_legend, _to_float,
                                   field_symbol)


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


def compare_figure(comparison, chosen=None, field="mu"):
    """Every route against the chosen model. Upper panel: log10 |Z(mu)/Z(0)|
    of every model (filled: ok; open: edge or noise limited; open triangles:
    upper bounds where not one digit is supported; rows beyond the
    convergence radius of a series are not drawn). Lower panel: each
    route's deviation from the reference in units of the combined error
    (shaded: within +-1, agreement), where both have digits; the legend
    gives each route's largest |deviation|. The logarithm shows where the
    models part and where each loses the signal over any number of decades;
    the deviation says whether they agree."""
    chosen, devs = comparison_deviations(comparison, chosen)
    models = _by_model(comparison)
    order = ([chosen] if chosen in models else []) + [m for m in models if m != chosen]
    sym = field_symbol(field)
    fig = _new_figure(3.4 + 0.075 * (len(order) + 3))
    ax, ax_dev = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [1.6, 1.0]})
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
        if model in devs:
            dmu, dv, dok = devs[model]
            dv, dok = np.asarray(dv, dtype=float), np.asarray(dok, dtype=bool)
            ax_dev.plot(dmu, dv, ls=ls, lw=0.8, color=colour, gid=f"deviation:{model}",
                        zorder=3)
            ax_dev.plot(np.asarray(dmu)[dok], dv[dok], ls="none", marker=marker, ms=2.6,
                        color=colour, zorder=4)
            ax_dev.plot(np.asarray(dmu)[~dok], dv[~dok], ls="none", marker=marker, ms=3,
                        mfc="none", mew=0.7, color=colour, zorder=4)
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
    ax.set_ylabel(r"$\log_{10}|Z(%s)/Z(0)|$" % sym)
    _deviation_axes(ax_dev, devs, sym)
    handles += [Line2D([], [], ls="none", marker="o", mfc="none", color=GREY, ms=3),
                Line2D([], [], ls="none", marker="v", mfc="none", color=GREY, ms=3)]
    labels += ["edge/noise limited", "upper bound"]
    title = r"largest $|Z-Z_\mathrm{ref}|$ / combined error (lower panel)"
    if beyond:
        title += "\n(rows beyond the convergence radius not drawn)"
    ncols = 2 if max(len(t) for t in labels) <= 21 else 1
    fig.legend(handles, labels, loc="outside lower center", ncols=ncols, columnspacing=0.8,
               handlelength=1.8, handletextpad=0.4, title=title)
    return fig


def _deviation_axes(ax, devs, sym):
    """The lower panel of the compare figure: (Z - Z_ref) / combined error,
    signed by the real part, on a scale linear within +-1 (the band of
    agreement) and logarithmic beyond, so that a route off by 1e6 errors
    and one within its errors share the panel."""
    ax.axhspan(-1, 1, color=_C["sky_blue"], alpha=0.3, lw=0, zorder=0)
    ax.axhline(0, color=GREY, lw=0.5, zorder=1)
    ax.set_yscale("symlog", linthresh=1.0, linscale=1.0)
    values = [abs(v) for _, d, _ in devs.values() for v in d if math.isfinite(v)]
    top = max([1.5] + values)
    ax.set_ylim(-1.6 * top, 1.6 * top)
    ticks = [0.0] + [10.0 ** k for k in range(0, int(math.log10(1.6 * top)) + 1)]
    ax.set_yticks(sorted({-t for t in ticks} | set(ticks)))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: "%g" % (v if v else 0)))
    ax.yaxis.set_minor_locator(NullLocator())
    ax.set_xlabel(r"$%s$" % sym)
    ax.set_ylabel(r"$(Z-Z_\mathrm{ref})/\sigma_\mathrm{comb}$")


def zeros_figure(zeros, field="mu"):
    """Zeros of Z(mu) in the complex mu plane: each zero with its error disc
    (radius err; open symbols: Newton's iteration did not converge), and,
    dashed, the disc of radius edge_shift over which the ends of the data
    range could move it (drawn for the zeros flagged as possible artefacts
    of the range, which are also drawn open); the searched box, the real
    axis (real zeros are sign changes of the phase factor) and the disc
    |mu| < radius in which the cumulant series of ln Z converges. A
    multiplicity above 1 is written beside its zero."""
    sym = field_symbol(field)
    fig = _new_figure(3.1)
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
        r = float(radius)
        ax.add_patch(Circle((0, 0), r, fc=_C["orange"], alpha=0.12, lw=0, zorder=0,
                            label="cumulant series converges"))
        t = np.linspace(0, 2 * np.pi, 721)
        ax.plot(r * np.cos(t), r * np.sin(t), ":", color=_C["orange"], lw=0.9, gid="radius",
                zorder=1)
    ax.axhline(0, color=GREY, lw=0.6, zorder=0.5, label=r"real axis")
    if items:
        re_ = np.array([float(z.re) for z in items])
        im_ = np.array([float(z.im) for z in items])
        err = np.array([float(z.err) for z in items])
        done = np.array([bool(getattr(z, "converged", True)) for z in items])
        edge = np.array([bool(getattr(z, "edge_limited", False)) for z in items])
        shift = [getattr(z, "edge_shift", None) for z in items]
        for x, y, e in zip(re_, im_, err):
            ax.add_patch(Ellipse((x, y), 2 * e, 2 * e, fc=_C["blue"], alpha=0.35, lw=0,
                                 zorder=2))
        for x, y, d, flagged in zip(re_, im_, shift, edge):
            if flagged and d is not None and math.isfinite(float(d)):
                ax.add_patch(Ellipse((x, y), 2 * float(d), 2 * float(d), fill=False,
                                     ls="--", lw=0.6, ec=_C["vermillion"], zorder=2))
        good = done & ~edge
        ax.plot(re_[good], im_[good], "o", ms=3, color=_C["blue"], ls="none",
                label=r"zero of $Z(%s)$" % sym, gid="zeros", zorder=3)
        if (done & edge).any():
            ax.plot(re_[done & edge], im_[done & edge], "o", ms=3.2, mfc="white", mew=0.8,
                    color=_C["vermillion"], ls="none", zorder=3, gid="zeros_edge",
                    label="range could move it (dashed)")
        if (~done).any():
            ax.plot(re_[~done], im_[~done], "s", ms=3.5, mfc="none", color=_C["black"],
                    ls="none", label="not converged", gid="zeros_unconverged", zorder=3)
        for z, x, y in zip(items, re_, im_):
            m = int(getattr(z, "multiplicity", 1) or 1)
            if m > 1:
                ax.annotate(f"×{m}", (x, y), xytext=(3, 3), textcoords="offset points",
                            fontsize=7)
        if box is None:
            ax.margins(0.15)
    else:
        ax.text(0.5, 0.5, "no zeros found", transform=ax.transAxes, ha="center", va="center")
    ax.set_xlabel(r"$\mathrm{Re}\,%s$" % sym)
    ax.set_ylabel(r"$\mathrm{Im}\,%s$" % sym)
    _outside_legend(fig, ax)
    return fig
