"""Figures and the report section of the observables (analysis.observables):

  charge     n(mu) = <q>_mu / V against real mu (imaginary and real parts)
             with its total-error band, and chi(mu) below it when asked for
  imaginary  n(i nu) against nu: the prediction with its band and a
             measured reference with its error bars, chi^2 and p in the legend

Drawn in the shared style (report.style) without pyplot.
"""
import html

import matplotlib
import numpy as np

from signfree.report.style import GREY, STATUS_MARKS, STYLE, _C, _new_figure

CAPTIONS = {
    "charge": "The charge density n(mu) = <q>_mu / V (per system without a volume) against "
              "real mu: for a density symmetric in q it is purely imaginary. Bands: value ± "
              "total error (quadrature, model, edge and statistical); non-ok statuses are "
              "marked as in the phase figure, and rows without a supported digit are left "
              "out. Below, when asked for, the susceptibility chi(mu) = (<q^2>_mu - "
              "<q>_mu^2) / V.",
    "imaginary": "n(i nu) at imaginary mu = i nu, where the weight has no sign problem: the "
                 "prediction from the smoothed density (line and band: ± total error) beside "
                 "the measured reference (points with their errors); the legend gives chi^2 "
                 "of the agreement, with the covariance of the prediction over the points.",
}


def _series(values, mus, part):
    """(mu, value, low, high, status) of the rows with a supported digit."""
    out = []
    for mu, v in zip(mus, values):
        if v.last_digit is None:
            continue
        x = float(getattr(v.value, part))
        err = float(v.total_err)
        out.append((float(mu), x, x - err, x + err, v.status))
    return out


def _draw(ax, values, mus, part, colour, label):
    pts = _series(values, mus, part)
    if not pts:
        return False
    mu, y, lo, hi, status = (np.array(c) if i < 4 else list(c) for i, c in
                             enumerate(zip(*pts)))
    ax.fill_between(mu, lo, hi, color=colour, alpha=0.25, lw=0, zorder=1)
    ax.plot(mu, y, "-o", ms=1.8, color=colour, label=label, zorder=3)
    for s, style in STATUS_MARKS.items():
        pick = [k for k, t in enumerate(status) if t == s]
        if pick:
            ax.plot(mu[pick], y[pick], ls="none", ms=4, mew=0.8, label=s, zorder=5, **style)
    return True


def _significant(values, part):
    """True when some row's part is larger than its total error."""
    return any(abs(getattr(v.value, part)) > v.total_err for v in values
               if v.last_digit is not None)


def charge_figure(analysis):
    obs = analysis.observables.real
    names = [o.name for o in obs.observables]
    panels = [n for n in ("n", "chi") if n in names]
    fig = _new_figure(2.6 + 1.6 * (len(panels) - 1))
    axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
    mus = obs.mus
    for ax, name in zip(axes, panels):
        values = obs.values[name]
        drew = False
        for part, colour in (("imag", _C["blue"]), ("real", _C["orange"])):
            if part == "real" and drew and not _significant(values, "real"):
                continue
            label = {"n": r"%s $n(\mu)$", "chi": r"%s $\chi(\mu)$"}[name] % (
                "Im" if part == "imag" else "Re")
            if part == "imag" and not _significant(values, "imag"):
                continue
            drew |= _draw(ax, values, mus, part, colour, label)
        ax.axhline(0, color=GREY, lw=0.5, zorder=0)
        ax.set_ylabel({"n": r"$n(\mu)=\langle q\rangle_\mu/V$",
                       "chi": r"$\chi(\mu)$"}[name])
    axes[-1].set_xlabel(r"$\mu$")
    if len(mus) > 1:
        axes[-1].set_xlim(float(min(mus)), float(max(mus)))
    handles, labels = [], []
    for ax in axes:
        for h, l in zip(*ax.get_legend_handles_labels()):
            if l not in labels:
                handles.append(h)
                labels.append(l)
    if handles:
        fig.legend(handles, labels, loc="outside lower center", ncols=2, columnspacing=1.0,
                   handletextpad=0.5)
    return fig


def imaginary_figure(analysis):
    check = analysis.observables.check
    ref = check.reference
    fig = _new_figure(2.8)
    ax = fig.subplots()
    nu = np.array([float(x) for x in ref.nu])
    ok = [k for k, v in enumerate(check.values) if v.last_digit is not None]
    if ok:
        x = nu[ok]
        y = np.array([float(check.values[k].value.real) for k in ok])
        e = np.array([float(check.values[k].total_err) for k in ok])
        ax.fill_between(x, y - e, y + e, color=_C["sky_blue"], alpha=0.35, lw=0, zorder=1)
        ax.plot(x, y, "-", color=_C["blue"], label="smoothed density", zorder=3)
    ax.errorbar(nu, ref.value, yerr=ref.error, fmt="o", ms=2.5, elinewidth=0.7,
                color=_C["vermillion"], label="reference", zorder=4)
    ax.set_xlabel(r"$\nu$ ($\mu = i\nu$)")
    ax.set_ylabel(r"$n(i\nu)$")
    title = None
    if check.dof:
        title = r"$\chi^2$ = %.3g for %d points, p = %.2g" % (check.chi2, check.dof,
                                                             check.p_value)
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=2, title=title)
    return fig


def observable_figures(analysis):
    """{name: Figure} for the observables of ``analysis`` (empty without)."""
    obs = getattr(analysis, "observables", None)
    out = {}
    if obs is None:
        return out
    with matplotlib.rc_context(STYLE):
        if obs.real is not None and {"n", "chi"} & {o.name for o in obs.real.observables}:
            out["charge"] = charge_figure(analysis)
        if obs.check is not None:
            out["imaginary"] = imaginary_figure(analysis)
    return out


def observables_section(analysis):
    """HTML: what the observable columns mean, the rows off the real axis
    and the imaginary-mu check ('' without observables)."""
    obs = getattr(analysis, "observables", None)
    if obs is None:
        return ""
    e = html.escape
    out = ['<section id="observables"><h2>Observables</h2>']
    if obs.real is not None:
        names = ", ".join(o.name for o in obs.real.observables)
        out.append(f"<p>Columns {e(names)} of the results table, each with _imag, _err "
                   "(statistical, from the resampled ratio itself or the propagated fit "
                   "covariance), _quad_err, _model_err, _edge_err and _status. n = "
                   "&lt;q&gt;<sub>&mu;</sub>/V, chi = (&lt;q<sup>2</sup>&gt;<sub>&mu;</sub> "
                   "- &lt;q&gt;<sub>&mu;</sub><sup>2</sup>)/V, &lt;O&gt; = &int; O &rho; "
                   "e<sup>i&mu;q</sup> / &int; &rho; e<sup>i&mu;q</sup>. A ratio is never "
                   "better than the status of Z(&mu;) at the same &mu;.</p>")
    if obs.complex is not None:
        out.append("<p>Rows at imaginary and complex &mu; follow the real ones in the "
                   "results table.</p>")
        out.append(f"<pre>{e(obs.complex.text())}</pre>")
    if obs.check is not None:
        out.append(f"<p>{e(obs.check.line())}.</p>")
        head = "".join(f"<th>{e(c)}</th>" for c in obs.check.COLUMNS)
        body = "".join("<tr>" + "".join(f'<td class="num">{e(str(r[c]))}</td>'
                                         for c in obs.check.COLUMNS) + "</tr>"
                       for r in obs.check.records())
        out.append(f'<div class="scroll"><table id="imaginary-table"><thead><tr>{head}'
                   f"</tr></thead><tbody>{body}</tbody></table></div>")
    out.append("</section>")
    return "\n".join(out)
