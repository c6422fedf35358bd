"""The validated density object every later stage works from, the checks
that make it (shared by every reader and by :meth:`Density.from_arrays`),
and the piecewise-linear reconstruction of ln rho from it.

A ``Density`` is made by :mod:`signfree.io.reading` or by
``Density.from_arrays`` (both validate alike); nothing after that re-checks
it.
"""
import math
from dataclasses import dataclass, field

import numpy as np

from signfree.errors import InputError

KINDS = ("slopes", "log_density", "histogram")
SYMMETRIES = ("even", "odd", "none")
# kind: (required columns, optional columns, value column, error column)
COLUMNS = {
    "slopes": (("q", "width", "slope"), ("slope_err", "replica"), "slope", "slope_err"),
    "log_density": (("q", "log_density"), ("log_density_err", "replica"), "log_density",
                    "log_density_err"),
    "histogram": (("q", "count"), ("width", "replica"), "count", None),
}
# a column that names the kind when none is stated, in order of precedence
INFER = (("slope", "slopes"), ("log_density", "log_density"), ("count", "histogram"))
GRID_RTOL = 1e-9    # q or width values closer than this times the scale agree
ZERO_RTOL = 1e-12   # a replica spread below this times the scale is zero
MIN_POINTS = 3


@dataclass(frozen=True)
class Density:
    """A measured generalised density rho(q) over the charge q.

    kind      'slopes' (d ln rho/dq per interval), 'log_density' (ln rho up to a
              constant on a grid) or 'histogram' (counts per bin).
    q         sorted grid: interval centres, grid points or bin centres.
    width     interval or bin widths (slopes always; histogram if given).
    value     central value per point: the replica mean of the slope or of
              ln rho (each replica shifted to zero mean first, since ln rho is
              known only up to a constant), or the counts pooled over replicas.
    error     standard error of ``value`` per point, or None.
    error_source  'stated', 'replicas', 'poisson' or 'none'.
    replicas  R x N array of the per-replica values on the same grid, or None.
    """

    kind: str
    q: np.ndarray
    value: np.ndarray
    width: np.ndarray = None
    error: np.ndarray = None
    error_source: str = "none"
    replicas: np.ndarray = None
    replica_labels: tuple = ()
    volume: float = None
    symmetry: str = None
    source: str = "<memory>"
    metadata: dict = field(default_factory=dict)

    @classmethod
    def from_arrays(cls, kind=None, *, volume=None, symmetry=None, source="<arrays>",
                    metadata=None, **columns):
        """A Density from NumPy arrays named as a file's columns (q, width,
        slope, slope_err, log_density, log_density_err, count, replica),
        checked exactly as reading a file checks them; ``kind`` is inferred
        from the columns when not given. Raises :class:`InputError`.

            Density.from_arrays(q=q, width=w, slope=s, replica=r, volume=64)
        """
        if kind is None:
            kind = next((k for col, k in INFER if col in columns), None)
            if kind is None:
                raise InputError(source, "cannot infer the kind: no 'slope', 'log_density' "
                                 "or 'count' array")
        if kind not in KINDS:
            raise InputError(source, f"unknown kind {kind!r}; expected one of "
                             f"{', '.join(KINDS)}")
        if symmetry is not None and symmetry not in SYMMETRIES:
            raise InputError(source, f"unknown symmetry {symmetry!r}; expected one of "
                             f"{', '.join(SYMMETRIES)}")
        if volume is not None and not (np.isfinite(volume) and volume > 0):
            raise InputError(source, f"volume must be a positive number, got {volume!r}")
        required, optional, _, _ = COLUMNS[kind]
        missing = [c for c in required if c not in columns]
        if missing:
            raise InputError(source, f"missing required array(s) "
                             f"{', '.join(map(repr, missing))} for kind '{kind}'")
        unknown = [c for c in columns if c not in required + optional]
        if unknown:
            raise InputError(source, f"unknown array(s) {', '.join(map(repr, unknown))} for "
                             f"kind '{kind}'; expected {', '.join(required + optional)}")
        arrays = {c: np.asarray(v) for c, v in columns.items() if v is not None}
        lengths = {c: a.shape for c, a in arrays.items()}
        if any(a.ndim != 1 for a in arrays.values()) or len(set(lengths.values())) > 1:
            raise InputError(source, "the arrays must be one-dimensional and of one length; "
                             "got shapes " + ", ".join(f"{c} {s}" for c, s in lengths.items()))
        check_columns(source, arrays)
        return assemble(kind, arrays, source=source, volume=volume, symmetry=symmetry,
                        metadata=metadata)

    @property
    def n_points(self):
        return len(self.q)

    @property
    def domain(self):
        """[q_min, q_max] covered by the data: interval edges for slopes and
        for histograms with widths, otherwise the outermost grid points."""
        if self.width is not None:
            return (float(self.q[0] - self.width[0] / 2),
                    float(self.q[-1] + self.width[-1] / 2))
        return float(self.q[0]), float(self.q[-1])

    def log_density_points(self):
        """(q, ln rho, error) for the kinds measured as ln rho: log_density as
        given; histogram as ln((count + 1/2) / width) with the Poisson error
        1/sqrt(count), empty bins left out (ln 0 has no finite value). The
        half count removes the 1/(2 count) bias of the logarithm of a Poisson
        count (E ln(n + 1/2) = ln lambda + O(lambda^-2); common practice)."""
        if self.kind == "log_density":
            return self.q, self.value, self.error
        if self.kind == "histogram":
            keep = self.value > 0
            width = self.width[keep] if self.width is not None else 1.0
            counts = self.value[keep]
            return self.q[keep], np.log((counts + 0.5) / width), 1.0 / np.sqrt(counts)
        raise ValueError(f"kind {self.kind!r} is not measured as ln rho")


def slope_knots(q, width, slope):
    """Continuous piecewise-linear ln rho from per-interval slopes: the usual
    density-of-states reconstruction (ln rho linear with the measured slope on
    each interval, continuous at the edges).

    Returns (knots, ln_rho_at_knots, segment_slopes) with ln rho = 0 at the
    first knot. Where consecutive intervals leave a gap it is bridged with
    the mean of the two neighbouring slopes; where they overlap the shared
    edge is put at the middle of the overlap.
    """
    lo = q - width / 2
    hi = q + width / 2
    knots = [lo[0]]
    slopes = []
    for i in range(len(q)):
        if i + 1 < len(q) and hi[i] > lo[i + 1]:
            end = 0.5 * (hi[i] + lo[i + 1])
        else:
            end = hi[i]
        slopes.append(slope[i])
        knots.append(end)
        if i + 1 < len(q) and lo[i + 1] > end:
            slopes.append(0.5 * (slope[i] + slope[i + 1]))
            knots.append(lo[i + 1])
    knots = np.asarray(knots, dtype=float)
    slopes = np.asarray(slopes, dtype=float)
    values = np.concatenate([[0.0], np.cumsum(slopes * np.diff(knots))])
    return knots, values, slopes


POOL_DOF = 40      # degrees of freedom a pooled replica variance aims for


def pooled_errors(error, n_replicas):
    """(errors, degrees of freedom): the standard errors of replica means
    with each point's variance pooled over a window of neighbouring points.

    A variance from the scatter of R replicas has only R - 1 degrees of
    freedom; used as fit weights, such noisy variances make the weighted
    fit noisier than its nominal covariance says and correlate the weights
    with the data. Where the noise varies smoothly along q, the mean of the
    variances over a window of 2 w + 1 neighbours (w chosen so that the
    window holds about POOL_DOF degrees of freedom; shrunk at the ends) is
    an estimate with (2 w + 1)(R - 1) degrees of freedom (pooled variance;
    common practice)."""
    var = np.asarray(error, dtype=float) ** 2
    n = len(var)
    dof_each = max(n_replicas - 1, 1)
    w = min(max(0, int(np.ceil((POOL_DOF / dof_each - 1) / 2))), (n - 1) // 2)
    if w == 0:
        return np.sqrt(var), dof_each
    csum = np.concatenate([[0.0], np.cumsum(var)])
    lo = np.clip(np.arange(n) - w, 0, n)
    hi = np.clip(np.arange(n) + w + 1, 0, n)
    pooled = (csum[hi] - csum[lo]) / (hi - lo)
    return np.sqrt(pooled), int(dof_each * (2 * w + 1))


# ------------------------------------------------------------------ checks

def _array_where(i, name, columns):
    """(line, column, text) of row i of an array column, for messages: no
    line (the message names the row)."""
    value = np.asarray(columns[name])[i]
    return None, None, str(value.item() if hasattr(value, "item") else value)


def check_columns(source, columns, where=None):
    """Check every value as a file's fields are checked: finite numbers;
    width and *_err > 0; count >= 0 and whole; replica an integer label.
    ``where(i, name)`` gives (line, column, text) of row i for messages
    (default: the row number of an array). Raises :class:`InputError`."""
    where = where or (lambda i, name: _array_where(i, name, columns))
    for name, values in columns.items():
        values = np.asarray(values)
        if name == "replica":
            if values.dtype.kind in "iu":
                continue
            bad = ~np.isfinite(values) | (values != np.round(values)) if \
                values.dtype.kind == "f" else np.ones(len(values), dtype=bool)
            _first_bad(source, name, bad, where, "{text} is not an integer label")
            continue
        if values.dtype.kind not in "iuf":
            raise InputError(source, f"column '{name}': expected numbers, got values of type "
                             f"{values.dtype}")
        _first_bad(source, name, ~np.isfinite(values), where, "{text} is not a finite number")
        if name == "width" or name.endswith("_err") or name == "weight":
            _first_bad(source, name, values <= 0, where, "must be > 0, got {bare}")
        if name == "count":
            _first_bad(source, name, values < 0, where, "must be >= 0, got {bare}")
            _first_bad(source, name, values != np.floor(values), where,
                       "{text} is not a whole number")


def _first_bad(source, name, bad, where, template):
    hits = np.flatnonzero(bad)
    if hits.size:
        i = int(hits[0])
        line, col, raw = where(i, name)
        message = f"column '{name}': " + template.format(text=repr(raw), bare=raw)
        if line is None:
            message += f" (row {i + 1})"
        raise InputError(source, message, line, col)


def assemble(kind, columns, source="<memory>", volume=None, symmetry=None, metadata=None,
             where=None):
    """A :class:`Density` of ``kind`` from checked columns (name -> array):
    replicas grouped by label and sorted by q, their grids compared, the
    central values formed (the rules are those of the README's input
    section). Histogram replicas on different ranges are put on the union of
    their bins, with zero counts where a replica has no bin. ``where(i,
    name)`` locates row i for messages."""
    where = where or (lambda i, name: _array_where(i, name, columns))
    required, optional, vcol, ecol = COLUMNS[kind]
    n = len(columns["q"])
    if n == 0:
        raise InputError(source, "no data rows")
    labels = columns.get("replica")
    order = np.arange(n)
    groups = []
    if labels is None:
        groups.append((None, order))
    else:
        labels = np.asarray(labels).astype(np.int64)
        for lab in np.unique(labels):
            groups.append((int(lab), order[labels == lab]))
    reps = []
    for lab, rows in groups:
        q = np.asarray(columns["q"], dtype=np.float64)[rows]
        idx = rows[np.argsort(q, kind="stable")]
        rep = {c: np.asarray(columns[c], dtype=np.float64)[idx]
               for c in required + optional if c in columns and c != "replica"}
        rep.update(label=lab, rows=idx, first=int(rows.min()))
        reps.append(rep)
    q_tol = GRID_RTOL * max(np.abs(r["q"]).max() for r in reps)
    for r in reps:
        _check_repeats(source, r, q_tol, where)
    if kind == "histogram" and len(reps) > 1:
        reps = _common_bins(source, reps, q_tol, where)
    ref = reps[0]
    if "width" in columns:
        w_tol = GRID_RTOL * max(r["width"].max() for r in reps)
    for r in reps[1:]:
        _check_same(source, "q", "a different q grid", r, ref, q_tol, where)
        if "width" in columns:
            _check_same(source, "width", "different widths", r, ref, w_tol, where)
    if len(ref["q"]) < MIN_POINTS:
        raise InputError(source, f"only {len(ref['q'])} distinct q point(s); at least "
                         f"{MIN_POINTS} are needed")
    n_rep = len(reps)
    values = np.array([r[vcol] for r in reps])
    if kind == "log_density" and n_rep > 1:
        values -= values.mean(axis=1, keepdims=True)
    value = values.sum(axis=0) if kind == "histogram" else values.mean(axis=0)
    if kind == "histogram":
        error, error_source = None, "poisson"
    elif ecol in columns:
        errs = np.array([r[ecol] for r in reps])
        error = errs[0] if n_rep == 1 else np.sqrt(np.mean(errs ** 2, axis=0) / n_rep)
        error_source = "stated"
    elif n_rep > 1:
        # standard error of the mean of independent replicas
        error = values.std(axis=0, ddof=1) / math.sqrt(n_rep)
        error_source = "replicas"
        if np.any(error <= ZERO_RTOL * np.abs(values).max()):
            error, error_source = None, "none"
    else:
        error, error_source = None, "none"
    label_list = tuple(r["label"] for r in reps if r["label"] is not None)
    return Density(kind=kind, q=ref["q"], value=value, width=ref.get("width"), error=error,
                   error_source=error_source, replicas=values if n_rep > 1 else None,
                   replica_labels=label_list, volume=volume, symmetry=symmetry,
                   source=str(source), metadata=dict(metadata or {}))


def _named(label):
    return "" if label is None else f" in replica {label}"


def _check_repeats(source, rep, tol, where):
    close = np.flatnonzero(np.diff(rep["q"]) <= tol)
    if close.size:
        # the repeat that comes second in the input, the earliest such
        pairs = [(max(rep["rows"][i], rep["rows"][i + 1]), min(rep["rows"][i], rep["rows"][i + 1]),
                  i) for i in close]
        second, first, i = min(pairs)
        line, col, _ = where(int(second), "q")
        first_line = where(int(first), "q")[0]
        at = f"first at line {first_line}" if first_line is not None else f"first at row " \
            f"{int(first) + 1}"
        raise InputError(source, f"column 'q': q = {float(rep['q'][i])} repeated"
                         f"{_named(rep['label'])} ({at})", line, col)


def _check_same(source, name, what, rep, ref, tol, where):
    a, b = rep[name], ref[name]
    if len(a) != len(b):
        detail = f"{len(a)} points vs {len(b)}"
    else:
        diff = np.flatnonzero(np.abs(a - b) > tol)
        if not diff.size:
            return
        i = diff[0]
        detail = f"{name} = {float(a[i])} vs {float(b[i])} at point {i + 1}"
    line, col, _ = where(rep["first"], name)
    raise InputError(source, f"column '{name}': replica {rep['label']} has {what} from "
                     f"replica {ref['label']} ({detail})", line, col)


def _common_bins(source, reps, tol, where):
    """Histogram replicas on the union of their bin centres, with zero
    counts where a replica has no bin (a replica that saw no configuration
    there). Bins that coincide must have the same width; the widths of the
    union are taken from the replicas that have each bin."""
    ref = reps[0]
    for r in reps[1:]:
        # where two replicas overlap, their bins must coincide
        mine = r["q"][(r["q"] >= ref["q"][0] - tol) & (r["q"] <= ref["q"][-1] + tol)]
        theirs = ref["q"][(ref["q"] >= r["q"][0] - tol) & (ref["q"] <= r["q"][-1] + tol)]
        if len(mine) != len(theirs) or np.any(np.abs(mine - theirs) > tol):
            line, col, _ = where(r["first"], "q")
            raise InputError(source, f"column 'q': replica {r['label']} has a different q grid "
                             f"from replica {ref['label']} (where both have bins they differ, "
                             "so they are not one binning on different ranges)", line, col)
    allq = np.concatenate([r["q"] for r in reps])
    union = np.unique(allq)
    keep = np.concatenate([[True], np.diff(union) > tol])
    union = union[keep]
    out = []
    widths = np.full(len(union), np.nan)
    for r in reps:
        pos = np.searchsorted(union, r["q"] - tol)
        if np.any(np.diff(pos) != 1):
            # not a contiguous run of the common bins: another binning
            line, col, _ = where(r["first"], "q")
            raise InputError(source, f"column 'q': replica {r['label']} has a different q grid "
                             f"from replica {reps[0]['label']} (its bins interleave with "
                             "another replica's, so they are not one binning on different "
                             "ranges)", line, col)
        counts = np.zeros(len(union))
        counts[pos] = r["count"]
        if "width" in r:
            w_tol = GRID_RTOL * max(x["width"].max() for x in reps)
            known = ~np.isnan(widths[pos])
            clash = np.flatnonzero(known & (np.abs(widths[pos] - r["width"]) > w_tol))
            if clash.size:
                i = clash[0]
                line, col, _ = where(r["first"], "width")
                raise InputError(source, f"column 'width': replica {r['label']} has different "
                                 f"widths from another replica (width = {float(r['width'][i])} "
                                 f"vs {float(widths[pos][i])} at q = {float(r['q'][i])})",
                                 line, col)
            widths[pos] = r["width"]
        rows = np.full(len(union), r["first"])
        rows[pos] = r["rows"]
        out.append(dict(r, q=union, count=counts, rows=rows))
    if "width" in reps[0]:
        for r in out:
            r["width"] = widths
    return out
