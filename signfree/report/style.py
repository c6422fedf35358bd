"""The look shared by every figure of signfree, and the number helpers the
figures and the report page share.

All figures use one style (:data:`STYLE`, applied with
``matplotlib.rc_context``): one journal column wide (3.4 in), 8 pt type and
the Okabe-Ito colours, which stay distinct under the common colour-vision
deficiencies. |Z(mu)/Z(0)| falls far below the smallest double (1e-308), so
every logarithm is taken in mpmath before anything becomes a float.
"""
import math
from fractions import Fraction

import matplotlib
import mpmath
from matplotlib.figure import Figure

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
    "misfit": {"marker": "v", "color": _C["orange"]},
    "unresolved": {"marker": "X", "color": _C["black"]},
}


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
            text = "horizon: no mu of the scan is resolved two total errors away from zero"
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


FIELDS = {"mu": r"\mu", "theta": r"\theta"}


def field_symbol(field="mu"):
    """The TeX symbol of the field on the figures' axes: mu (a chemical
    potential or field) or theta (a theta term)."""
    if field not in FIELDS:
        raise ValueError(f"unknown field {field!r}; expected one of {', '.join(FIELDS)}")
    return FIELDS[field]


def _new_figure(height):
    return Figure(figsize=(COLUMN_WIDTH, height))


LEGEND_COLUMN_CHARS = 24   # longer labels get one legend column, so none is clipped


def _outside_legend(fig, ax, ncols=2):
    """The axes' legend below the axes, in two columns when every label is
    short enough to fit half the figure's width, else in one."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        if max(len(_plain(t)) for t in labels) > LEGEND_COLUMN_CHARS:
            ncols = 1
        fig.legend(handles, labels, loc="outside lower center", ncols=ncols,
                   columnspacing=1.0, handletextpad=0.5)


def _plain(label):
    """A legend label's length as printed, roughly: TeX markup removed."""
    import re
    return re.sub(r"\\[A-Za-z]+|[${}_^]", "", label)
