"""Reading a measured density rho(q) into a :class:`Density`.

Sources (:mod:`signfree.io.tables`): delimited text (comma, semicolon or
whitespace), NumPy ``.npy``/``.npz``, HDF5 (``file.h5:/group/dataset``).

Text format
-----------
* Blank lines are skipped; lines starting with ``#`` are comments.
* Comment lines ``# key: value`` before the header carry metadata (key
  lower-cased, one word of letters, digits, ``_``, ``-`` or ``.``; value
  stripped). Known keys: ``kind`` (slopes | log_density | histogram),
  ``volume`` (a positive number), ``symmetry`` (even | odd | none). Arrays
  and HDF5 carry them as 0-d arrays of the npz, or attributes.
* The first other line is the header: column names (any case, in any
  order), separated as the whole file is:

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
  repetition of the whole measurement; all replicas share one q grid, except
  histogram replicas, which may cover different ranges of one binning (a
  missing bin has a zero count).

Every problem raises :class:`InputError` located as ``file:line:column``
(physical 1-based line, 1-based field index) as precisely as it is known;
problems of the file as a whole carry no line.
"""
import math

from signfree.density import (COLUMNS, INFER, KINDS, SYMMETRIES, Density, assemble,
                              check_columns)
from signfree.errors import InputError
from signfree.io.tables import open_table, warn_ignored

__all__ = ["read_density", "Density", "SYMMETRIES"]


def read_density(path, kind=None, volume=None, symmetry=None):
    """Read a density file; ``kind``, ``volume`` and ``symmetry`` given here
    override the file's metadata. Raises :class:`InputError` on bad input."""
    return density_from_table(open_table(path), kind, volume, symmetry)


def density_from_table(table, kind=None, volume=None, symmetry=None):
    """:func:`read_density` for an opened table."""
    src = table.source
    kind = choice(table, "kind", kind, KINDS)
    symmetry = choice(table, "symmetry", symmetry, SYMMETRIES)
    volume = read_volume(table, volume)
    names = table.names
    if kind is None:
        kind = next((k for col, k in INFER if col in names), None)
        if kind is None:
            raise InputError(src, "cannot infer the kind from the columns: no 'slope', "
                             "'log_density' or 'count' column and no '# kind:' line; found "
                             + columns_found(names), table.header_line)
    required, optional, _, _ = COLUMNS[kind]
    missing = [c for c in required if c not in names]
    if missing:
        raise InputError(src, f"missing required column(s) {', '.join(map(repr, missing))} "
                         f"for kind '{kind}'; found " + columns_found(names),
                         table.header_line)
    wanted = [c for c in required + optional if c in names]
    warn_ignored(table, wanted)
    columns = table.load(wanted, integer=("replica",))
    check_columns(src, columns, table.where)
    return assemble(kind, columns, source=src, volume=volume, symmetry=symmetry,
                    metadata=table.meta, where=table.where)


def columns_found(names):
    """The columns a table has, for messages."""
    shown = [f"'{n}'" if n else "(no name)" for n in names]
    return "columns " + ", ".join(shown) if shown else "no columns"


def choice(table, name, arg, allowed):
    """The argument, else the metadata value, checked against ``allowed``."""
    if arg is not None:
        text, line = str(arg).strip(), None
    elif name in table.meta:
        text, line = str(table.meta[name]), table.meta_lines.get(name)
    else:
        return None
    if text.lower() not in allowed:
        raise InputError(table.source, f"unknown {name} {text!r}; expected one of "
                         f"{', '.join(allowed)}", line)
    return text.lower()


def read_volume(table, arg):
    if arg is not None:
        text, line = arg, None
    elif "volume" in table.meta:
        text, line = table.meta["volume"], table.meta_lines.get("volume")
    else:
        return None
    try:
        value = float(text)
    except (TypeError, ValueError):
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise InputError(table.source, f"volume must be a positive number, got {text!r}", line)
    return value
