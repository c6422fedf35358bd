"""Reading a measured density rho(q) from a CSV file into a :class:`Density`.

Format
------
* Blank lines are skipped; lines starting with ``#`` are comments.
* Comment lines ``# key: value`` before the header carry metadata (key
  lower-cased, one word of letters, digits, ``_``, ``-`` or ``.``; value
  stripped). Known keys: ``kind`` (slopes | log_density | histogram),
  ``volume`` (a positive number), ``symmetry`` (even | odd | none).
* The first other line is the header: comma-separated column names, looked
  up by name in any order:

  ===========  =================  =========================
  kind         required           optional
  ===========  =================  =========================
  slopes       q, width, slope    slope_err, replica
  log_density  q, log_density     log_density_err, replica
  histogram    q, count           width, replica
  ===========  =================  =========================

  Without a stated kind it is inferred from the header: a ``slope``,
  ``log_density`` or ``count`` column, in that order of precedence. Other
  columns are ignored, with one warning line each on stderr.
* ``replica`` is an integer label. Rows sharing a label are one independent
  repetition of the whole measurement; all replicas share one q grid.

Every problem raises :class:`InputError` located as ``file:line:column``
(physical 1-based line, 1-based field index) as precisely as it is known;
problems of the file as a whole carry no line.
"""
import math
import re
import sys

import numpy as np

from signfree.density import KINDS, Density
from signfree.errors import InputError

SYMMETRIES = ("even", "odd", "none")
# kind: (required columns, optional columns, value column, error column)
COLUMNS = {
    "slopes": (("q", "width", "slope"), ("slope_err", "replica"),
               "slope", "slope_err"),
    "log_density": (("q", "log_density"), ("log_density_err", "replica"),
                    "log_density", "log_density_err"),
    "histogram": (("q", "count"), ("width", "replica"), "count", None),
}
INFER = (("slope", "slopes"), ("log_density", "log_density"),
         ("count", "histogram"))
GRID_RTOL = 1e-9    # q or width values closer than this times the scale agree
ZERO_RTOL = 1e-12   # a replica spread below this times the scale is zero
MIN_POINTS = 3

_META = re.compile(r"#\s*([A-Za-z0-9_.\-]+)\s*:(.*)$")
_INT = re.compile(r"[+-]?\d+$")


def _header(src, header):
    """(line number, column names) of a header, checked: present, no empty
    and no repeated names."""
    if header is None:
        raise InputError(src, "empty file: no header line")
    hno, names = header
    for j, name in enumerate(names, 1):
        if not name:
            raise InputError(src, "empty column name in header", hno, j)
        if names.index(name) != j - 1:
            raise InputError(src, f"column '{name}' appears twice (first as "
                             f"column {names.index(name) + 1})", hno, j)
    return hno, names


def read_density(path, kind=None, volume=None, symmetry=None):
    """Read a density file; ``kind``, ``volume`` and ``symmetry`` given here
    override the file's metadata. Raises :class:`InputError` on bad input."""
    src = str(path)
    meta, meta_lines, header, rows = _split(_read_lines(path, src), src)
    kind = _choice(src, "kind", kind, meta, meta_lines, KINDS)
    symmetry = _choice(src, "symmetry", symmetry, meta, meta_lines, SYMMETRIES)
    volume = _volume(src, volume, meta, meta_lines)
    hno, names = _header(src, header)
    if kind is None:
        kind = next((k for col, k in INFER if col in names), None)
        if kind is None:
            raise InputError(src, "cannot infer the kind from the header: no "
                             "'slope', 'log_density' or 'count' column and "
                             "no '# kind:' line", hno)
    required, optional, vcol, ecol = COLUMNS[kind]
    missing = [c for c in required if c not in names]
    if missing:
        raise InputError(src, f"missing required column(s) "
                         f"{', '.join(map(repr, missing))} for kind '{kind}'",
                         hno)
    for name in names:
        if name not in required + optional:
            print(f"{src}: ignoring column '{name}'", file=sys.stderr)
    if not rows:
        raise InputError(src, "no data rows")

    cols = {c: names.index(c) for c in required + optional if c in names}
    groups = {}
    for no, fields in rows:
        if len(fields) != len(names):
            raise InputError(src, f"expected {len(names)} fields as in the "
                             f"header, found {len(fields)}", no)
        rec = {c: _field(src, no, j + 1, c, fields[j])
               for c, j in cols.items()}
        groups.setdefault(rec.pop("replica", None), []).append((no, rec))

    reps = [_replica(label, groups[label]) for label in sorted(groups)]
    q_tol = GRID_RTOL * max(np.abs(r["q"]).max() for r in reps)
    for r in reps:
        _check_repeats(src, r, q_tol, cols["q"] + 1)
    ref = reps[0]
    if "width" in cols:
        w_tol = GRID_RTOL * max(r["width"].max() for r in reps)
    for r in reps[1:]:
        _check_same(src, "q", "a different q grid", r, ref, q_tol,
                    cols["q"] + 1)
        if "width" in cols:
            _check_same(src, "width", "different widths", r, ref, w_tol,
                        cols["width"] + 1)
    if len(ref["q"]) < MIN_POINTS:
        raise InputError(src, f"only {len(ref['q'])} distinct q point(s); at "
                         f"least {MIN_POINTS} are needed")

    n_rep = len(reps)
    values = np.array([r[vcol] for r in reps])
    if kind == "log_density" and n_rep > 1:
        values -= values.mean(axis=1, keepdims=True)
    value = values.sum(axis=0) if kind == "histogram" else values.mean(axis=0)
    if kind == "histogram":
        error, error_source = None, "poisson"
    elif ecol in cols:
        errs = np.array([r[ecol] for r in reps])
        error = errs[0] if n_rep == 1 else np.sqrt(
            np.mean(errs ** 2, axis=0) / n_rep)
        error_source = "stated"
    elif n_rep > 1:
        # standard error of the mean of independent replicas
        error = values.std(axis=0, ddof=1) / math.sqrt(n_rep)
        error_source = "replicas"
        if np.any(error <= ZERO_RTOL * np.abs(values).max()):
            error, error_source = None, "none"
    else:
        error, error_source = None, "none"
    labels = tuple(r["label"] for r in reps if r["label"] is not None)
    return Density(
        kind=kind, q=ref["q"], value=value, width=ref.get("width"),
        error=error, error_source=error_source,
        replicas=values if n_rep > 1 else None, replica_labels=labels,
        volume=volume, symmetry=symmetry, source=src, metadata=dict(meta))


def _read_lines(path, src):
    try:
        with open(path, encoding="utf-8-sig") as f:
            return f.read().split("\n")
    except FileNotFoundError:
        raise InputError(src, "file not found") from None
    except UnicodeDecodeError:
        raise InputError(src, "cannot read file: not UTF-8 text") from None
    except OSError as exc:
        raise InputError(src, f"cannot read file: "
                         f"{exc.strerror or exc}") from None


def _split(lines, src):
    """Metadata (with line numbers), header and data rows, fields stripped."""
    meta, meta_lines, header, rows = {}, {}, None, []
    for no, raw in enumerate(lines, 1):
        text = raw.strip()
        if not text:
            continue
        if text.startswith("#"):
            match = _META.match(text) if header is None else None
            if match:
                key = match.group(1).lower()
                if key in meta:
                    raise InputError(src, f"metadata key '{key}' repeated "
                                     f"(first at line {meta_lines[key]})", no)
                meta[key], meta_lines[key] = match.group(2).strip(), no
            continue
        fields = [f.strip() for f in text.split(",")]
        if header is None:
            header = (no, fields)
        else:
            rows.append((no, fields))
    return meta, meta_lines, header, rows


def _choice(src, name, arg, meta, meta_lines, allowed):
    """The argument, else the metadata value, checked against ``allowed``."""
    if arg is not None:
        text, line = str(arg).strip(), None
    elif name in meta:
        text, line = meta[name], meta_lines[name]
    else:
        return None
    if text.lower() not in allowed:
        raise InputError(src, f"unknown {name} {text!r}; expected one of "
                         f"{', '.join(allowed)}", line)
    return text.lower()


def _volume(src, arg, meta, meta_lines):
    if arg is not None:
        text, line = arg, None
    elif "volume" in meta:
        text, line = meta["volume"], meta_lines["volume"]
    else:
        return None
    try:
        value = float(text)
    except (TypeError, ValueError):
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise InputError(src, f"volume must be a positive number, "
                         f"got {text!r}", line)
    return value


def _field(src, line, col, name, text):
    """One checked field: an int for 'replica', otherwise a finite float."""
    def bad(message):
        return InputError(src, f"column '{name}': {message}", line, col)
    if name == "replica":
        if not _INT.match(text):
            raise bad(f"{text!r} is not an integer label")
        return int(text)
    try:
        value = float(text)
    except ValueError:
        raise bad(f"{text!r} is not a number") from None
    if not math.isfinite(value):
        raise bad(f"{text!r} is not a finite number")
    if (name == "width" or name.endswith("_err")) and value <= 0:
        raise bad(f"must be > 0, got {text}")
    if name == "count":
        if value < 0:
            raise bad(f"must be >= 0, got {text}")
        if not value.is_integer():
            raise bad(f"{text!r} is not a whole number")
    return value


def _replica(label, records):
    """Columns of one replica as float arrays sorted by q (stable)."""
    lines = np.array([no for no, _ in records])
    order = np.argsort([rec["q"] for _, rec in records], kind="stable")
    out = {name: np.array([rec[name] for _, rec in records],
                          dtype=np.float64)[order] for name in records[0][1]}
    out.update(label=label, lines=lines[order], first=int(lines.min()))
    return out


def _named(label):
    return "" if label is None else f" in replica {label}"


def _check_repeats(src, rep, tol, col):
    close = np.flatnonzero(np.diff(rep["q"]) <= tol)
    if close.size:
        lines = rep["lines"]
        second, first, i = min((max(lines[i], lines[i + 1]),
                                min(lines[i], lines[i + 1]), i) for i in close)
        raise InputError(src, f"column 'q': q = {float(rep['q'][i])} repeated"
                         f"{_named(rep['label'])} (first at line {first})",
                         int(second), col)


def _check_same(src, name, what, rep, ref, tol, col):
    a, b = rep[name], ref[name]
    if len(a) != len(b):
        detail = f"{len(a)} points vs {len(b)}"
    else:
        diff = np.flatnonzero(np.abs(a - b) > tol)
        if not diff.size:
            return
        i = diff[0]
        detail = (f"{name} = {float(a[i])} vs {float(b[i])}"
                  f" at point {i + 1}")
    raise InputError(src, f"column '{name}': replica {rep['label']} has "
                     f"{what} from replica {ref['label']} "
                     f"({detail})", rep["first"], col)
