"""The manifest of a sweep: a CSV file with one ensemble per row.

    # couplings x volumes
    file,volume,beta
    runs/beta2.0_V512.csv,512,2.0
    runs/beta2.0_V1000.csv,1000,2.0

Columns, by name in any order:

  file      required: the input file, relative to the manifest's folder
  volume    optional: V of the ensemble (else --volume, else the file's
            '# volume:' line)
  kind, symmetry   optional: how to read this file (as --kind, --symmetry)
  any other column: a label of the ensemble (text, kept as written)

Lines starting with '#' are comments; blank lines are skipped. The labels
and the volume identify an ensemble (without labels or a volume column, the
file does): two rows that agree in all of them are an error, as is a label
named like a column of the combined tables. Every problem raises
:class:`~signfree.errors.InputError` located as file:line:column.
"""
import csv
import re
from dataclasses import dataclass
from pathlib import Path

from signfree.analysis.results import ResultTable
from signfree.analysis.volumes import LIMIT_COLUMNS, POINT_COLUMNS
from signfree.errors import InputError

KINDS = ("slopes", "log_density", "histogram", "samples")
SYMMETRIES = ("even", "odd", "none")
OPTION_COLUMNS = ("file", "volume", "kind", "symmetry")
TABLE_COLUMNS = ("ensemble", "outcome", "failure")
RESERVED = set(OPTION_COLUMNS) | set(TABLE_COLUMNS) | set(ResultTable.COLUMNS) \
    | set(LIMIT_COLUMNS) | set(POINT_COLUMNS)
_UNSAFE = re.compile(r"[^A-Za-z0-9._=+-]+")


@dataclass(frozen=True)
class Ensemble:
    """One row of a manifest: where its input is and what identifies it."""

    name: str           # its folder name in the sweep
    file: str           # as written in the manifest
    path: Path          # absolute path of the input
    labels: tuple       # ((label, value), ...) in the manifest's column order
    volume: float = None
    kind: str = None
    symmetry: str = None
    line: int = None

    @property
    def group(self):
        """The label values: ensembles that share them differ only in V."""
        return tuple(value for _, value in self.labels)


@dataclass(frozen=True)
class Manifest:
    """The ensembles of a sweep, in the manifest's order."""

    source: str
    label_names: tuple
    ensembles: tuple
    command: str = "sweep"      # what made it: 'sweep' (a file) or 'volumes' (inputs)

    def group_name(self, group):
        """A folder-safe name of a group of label values ('all' without labels)."""
        if not self.label_names:
            return "all"
        return _safe("_".join(f"{k}={v}" for k, v in zip(self.label_names, group)))


def read_manifest(path):
    """Read and check a manifest file; returns a :class:`Manifest`."""
    src = str(path)
    try:
        with open(path, newline="", encoding="utf-8") as f:
            lines = f.read().splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else exc
        raise InputError(src, f"cannot read the manifest: {reason}") from None
    rows = []
    for no, line in enumerate(lines, 1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        rows.append((no, [f.strip() for f in next(csv.reader([line]))]))
    if not rows:
        raise InputError(src, "empty manifest: no header line")
    hno, names = rows[0]
    for j, name in enumerate(names, 1):
        if not name:
            raise InputError(src, "empty column name in header", hno, j)
        if names.index(name) != j - 1:
            raise InputError(src, f"column '{name}' appears twice", hno, j)
        if name not in OPTION_COLUMNS and name in RESERVED:
            raise InputError(src, f"'{name}' is a column of the combined tables and cannot "
                             "be a label; rename it", hno, j)
    if "file" not in names:
        raise InputError(src, "missing required column 'file'", hno)
    if len(rows) == 1:
        raise InputError(src, "no ensembles: the manifest has a header and no rows")
    labels = tuple(n for n in names if n not in OPTION_COLUMNS)
    base = Path(path).resolve().parent
    out, seen = [], {}
    for no, fields in rows[1:]:
        if len(fields) != len(names):
            raise InputError(src, f"expected {len(names)} fields as in the header, found "
                             f"{len(fields)}", no)
        rec = dict(zip(names, fields))
        col = {n: names.index(n) + 1 for n in names}
        if not rec["file"]:
            raise InputError(src, "empty file name", no, col["file"])
        volume = _volume(src, no, col.get("volume"), rec.get("volume", ""))
        kind = _choice(src, no, col.get("kind"), rec.get("kind", ""), "kind", KINDS)
        symmetry = _choice(src, no, col.get("symmetry"), rec.get("symmetry", ""),
                           "symmetry", SYMMETRIES)
        pairs = tuple((n, rec[n]) for n in labels)
        key = tuple(v for _, v in pairs) + ((volume,) if "volume" in names else ())
        if not key:
            key = (rec["file"],)
        if key in seen:
            raise InputError(src, f"same labels and volume as line {seen[key]}: give each "
                             "ensemble its own", no)
        seen[key] = no
        out.append(Ensemble("", rec["file"], base / rec["file"], pairs, volume, kind,
                            symmetry, no))
    return Manifest(src, labels, tuple(_named(out)))


def manifest_of_files(files, volumes=None, kind=None, symmetry=None):
    """A manifest without labels for the inputs of ``signfree volumes``:
    one ensemble per file, with its volume from ``volumes`` when given."""
    files = [str(f) for f in files]
    if volumes is not None and len(volumes) != len(files):
        raise ValueError(f"--volumes: {len(volumes)} value(s) for {len(files)} input(s)")
    if len(set(files)) != len(files):
        raise ValueError("an input is given twice")
    out = []
    for i, f in enumerate(files):
        v = None if volumes is None else float(volumes[i])
        if v is not None and not v > 0:
            raise ValueError(f"--volumes: {v:g} is not a positive volume")
        out.append(Ensemble("", f, Path(f).resolve(), (), v, kind, symmetry, None))
    if volumes is not None and len(set(volumes)) != len(volumes):
        raise ValueError("--volumes: a volume is given twice")
    return Manifest(", ".join(Path(f).name for f in files), (), tuple(_named(out)), "volumes")


def _named(ensembles):
    """Folder names from the labels and the volume (or the file name),
    made unique."""
    names, out = set(), []
    for e in ensembles:
        parts = [f"{k}={v}" for k, v in e.labels]
        if e.volume is not None:
            parts.append(f"V={e.volume:g}")
        name = _safe("_".join(parts)) if parts else _safe(Path(e.file).stem)
        unique, k = name, 1
        while unique.lower() in names:
            k += 1
            unique = f"{name}-{k}"
        names.add(unique.lower())
        out.append(Ensemble(unique, e.file, e.path, e.labels, e.volume, e.kind, e.symmetry,
                            e.line))
    return out


def _safe(text):
    text = _UNSAFE.sub("-", text).strip(".-") or "ensemble"
    return text[:120]


def _volume(src, no, col, text):
    if not text:
        return None
    try:
        v = float(text)
    except ValueError:
        raise InputError(src, f"volume '{text}' is not a number", no, col) from None
    if not (v > 0 and v < float("inf")):
        raise InputError(src, f"volume {text} is not a positive number", no, col)
    return v


def _choice(src, no, col, text, what, allowed):
    if not text:
        return None
    if text not in allowed:
        raise InputError(src, f"unknown {what} '{text}'; expected one of "
                         f"{', '.join(allowed)}", no, col)
    return text


def check_inputs(manifest, kind=None, symmetry=None, volume=None):
    """Read every input of ``manifest`` once (raising InputError on bad
    input) and fill in each volume from its metadata; a ValueError when an
    input has no volume or two share one. For commands whose inputs must all
    be good before anything is written (``signfree volumes``)."""
    from signfree.io.samples import read_any
    filled = []
    for e in manifest.ensembles:
        data = read_any(e.path, kind=e.kind or kind, volume=e.volume or volume,
                        symmetry=e.symmetry or symmetry)
        v = e.volume or volume or getattr(data, "volume", None)
        if v is None:
            raise ValueError(f"{e.file}: no volume; give --volumes or a '# volume:' line")
        filled.append(Ensemble("", e.file, e.path, e.labels, float(v), e.kind, e.symmetry,
                               e.line))
    vols = [e.volume for e in filled]
    for i, v in enumerate(vols):
        if v in vols[:i]:
            raise ValueError(f"{filled[i].file} and {filled[vols.index(v)].file} have the "
                             f"same volume {v:g}")
    return Manifest(manifest.source, manifest.label_names, tuple(_named(filled)),
                    manifest.command)
