"""Named columns from the files pipelines write: delimited text (comma,
semicolon or whitespace), NumPy ``.npy`` (a structured array, or one plain
column of q) and ``.npz`` (one array per column), and HDF5 (``file.h5`` or
``file.h5:/group/dataset``; needs the optional h5py).

    table = open_table("run.dat")          # metadata and column names
    columns = table.load(["q", "count"])   # name -> float64 array

Text: blank lines and lines starting with ``#`` are skipped; ``# key: value``
lines before the header carry metadata; the first other line is the header,
whose separator (a comma, else a semicolon, else whitespace) is that of the
whole file. Column names are matched without regard to case or surrounding
quotes. Data are parsed by numpy.loadtxt in C, which holds no strings; when
it fails, a line-by-line pass finds the first bad field and reports it as
``file:line:column``. Every problem raises :class:`InputError`.
"""
import re
import sys
import warnings
from array import array

import numpy as np

from signfree.errors import InputError

_META = re.compile(r"#\s*([A-Za-z0-9_.\-]+)\s*:(.*)$")
_INT = re.compile(r"[+-]?\d+$")
HDF5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".he5")
NPY_SUFFIXES = (".npy", ".npz")


def file_of(source):
    """The file on disk of an input name (``data.h5:/run/q`` -> ``data.h5``)."""
    text = str(source)
    for suffix in HDF5_SUFFIXES:
        k = text.lower().find(suffix + ":")
        if k >= 0:
            return text[:k + len(suffix)]
    return text


def open_table(source):
    """The table of an input: a :class:`TextTable`, :class:`ArrayTable`
    (npy/npz) or an HDF5 table, by the file name's ending."""
    path = file_of(source)
    lower = path.lower()
    if lower.endswith(HDF5_SUFFIXES):
        return _hdf5_table(str(source), path)
    if lower.endswith(NPY_SUFFIXES):
        return _numpy_table(str(source), path)
    return TextTable(str(source))


class ArrayTable:
    """Columns held as arrays (from npy, npz or HDF5): no lines; messages
    name the row."""

    def __init__(self, source, columns, meta=None):
        self.source = source
        self.meta = {k.lower(): str(v).strip() for k, v in (meta or {}).items()}
        self.meta_lines = {}
        self.header_line = None
        lengths = {name: np.shape(a) for name, a in columns.items()}
        for name, shape in lengths.items():
            if len(shape) != 1:
                raise InputError(source, f"column '{name}' has shape {shape}; every column "
                                 "must be one-dimensional")
        if len(set(lengths.values())) > 1:
            raise InputError(source, "columns of different lengths: " + ", ".join(
                f"{n} {s[0]}" for n, s in lengths.items()))
        self._columns = {}
        names = []
        for name, values in columns.items():
            key = name.strip().lower()
            if key in self._columns:
                raise InputError(source, f"column '{key}' appears twice (names are matched "
                                 "without regard to case)")
            self._columns[key] = values
            names.append(key)
        self.names = names

    def load(self, wanted, integer=()):
        out = {}
        for name in wanted:
            values = np.asarray(self._columns[name])
            if values.dtype.kind not in "iufb":
                raise InputError(self.source, f"column '{name}': expected numbers, got "
                                 f"values of type {values.dtype}")
            out[name] = values if name in integer and values.dtype.kind in "iu" else \
                values.astype(np.float64)
        if out and not len(next(iter(out.values()))):
            raise InputError(self.source, "no data rows")
        return out

    def where(self, row, name):
        value = np.asarray(self._columns[name])[row]
        return None, None, str(value.item() if hasattr(value, "item") else value)


def _numpy_table(source, path):
    try:
        data = np.load(path, allow_pickle=False)
    except FileNotFoundError:
        raise InputError(source, "file not found") from None
    except (OSError, ValueError) as exc:
        raise InputError(source, f"cannot read the NumPy file: {exc}") from None
    meta = {}
    if isinstance(data, np.lib.npyio.NpzFile):
        with data:
            columns = {}
            for key in data.files:
                a = data[key]
                if key.lower() in ("kind", "volume", "symmetry") and a.size == 1:
                    meta[key] = a.reshape(()).item()
                else:
                    columns[key] = a
        return ArrayTable(source, columns, meta)
    if data.dtype.names:
        return ArrayTable(source, {n: data[n] for n in data.dtype.names})
    if data.ndim == 1:
        return ArrayTable(source, {"q": data})
    raise InputError(source, f"a plain array of shape {data.shape} has no column names; save a "
                     "structured array, or one array per column with numpy.savez")


def _hdf5_table(source, path):
    try:
        import h5py
    except ImportError:
        raise InputError(source, "reading HDF5 needs h5py (pip install 'signfree[hdf5]')") \
            from None
    inside = str(source)[len(path) + 1:] if len(str(source)) > len(path) else "/"
    try:
        f = h5py.File(path, "r")
    except FileNotFoundError:
        raise InputError(source, "file not found") from None
    except OSError as exc:
        raise InputError(source, f"cannot read the HDF5 file: {exc}") from None
    with f:
        if inside not in f:
            raise InputError(source, f"no group or dataset {inside!r} in {path} (it holds "
                             f"{', '.join(sorted(f.keys())) or 'nothing'})")
        node = f[inside]
        meta = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in node.attrs.items()}
        if isinstance(node, h5py.Group):
            columns = {k: v[()] for k, v in node.items() if isinstance(v, h5py.Dataset)}
            if not columns:
                raise InputError(source, f"the group {inside!r} holds no datasets")
            return ArrayTable(source, columns, meta)
        data = node[()]
    if getattr(data, "dtype", None) is not None and data.dtype.names:
        return ArrayTable(source, {n: data[n] for n in data.dtype.names}, meta)
    if np.ndim(data) == 1:
        return ArrayTable(source, {"q": data}, meta)
    raise InputError(source, f"the dataset {inside!r} of shape {np.shape(data)} has no column "
                     "names; use a compound dataset or a group with one dataset per column")


class TextTable:
    """A delimited text file: metadata and header read here, data by
    :meth:`load`."""

    def __init__(self, source):
        self.source = self.path = source
        self.meta, self.meta_lines = {}, {}
        self.header_line, header = None, None
        try:
            with open(source, encoding="utf-8-sig", newline=None) as f:
                for no, raw in enumerate(f, 1):
                    text = raw.strip()
                    if not text:
                        continue
                    if text.startswith("#"):
                        match = _META.match(text)
                        if match:
                            key = match.group(1).lower()
                            if key in self.meta:
                                raise InputError(source, f"metadata key '{key}' repeated "
                                                 f"(first at line {self.meta_lines[key]})", no)
                            self.meta[key], self.meta_lines[key] = match.group(2).strip(), no
                        continue
                    self.header_line, header = no, text
                    break
        except FileNotFoundError:
            raise InputError(source, "file not found") from None
        except UnicodeDecodeError:
            raise InputError(source, "cannot read file: not UTF-8 text") from None
        except IsADirectoryError:
            raise InputError(source, "cannot read file: it is a folder") from None
        except OSError as exc:
            raise InputError(source, f"cannot read file: {exc.strerror or exc}") from None
        if header is None:
            raise InputError(source, "empty file: no header line")
        self.delimiter = "," if "," in header else ";" if ";" in header else None
        names = [_unquote(n).lower() for n in _split(header, self.delimiter)]
        for j, name in enumerate(names, 1):
            if names.index(name) != j - 1 and name:
                raise InputError(source, f"column '{name}' appears twice (first as column "
                                 f"{names.index(name) + 1}; names are matched without regard "
                                 "to case)", self.header_line, j)
        self.names = names

    def load(self, wanted, integer=()):
        """name -> array for the ``wanted`` columns (int64 for those in
        ``integer``, float64 otherwise). When every column is wanted,
        numpy.loadtxt also checks that each row has the header's number of
        fields; otherwise it reads only the wanted ones."""
        everything = sorted(wanted) == sorted(self.names)
        order = list(self.names) if everything else list(wanted)
        cols = None if everything else [self.names.index(n) for n in order]
        dtype = [(f"c{k}", np.int64 if n in integer else np.float64)
                 for k, n in enumerate(order)]
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", UserWarning)   # "input contained no data"
                data = np.loadtxt(self.path, dtype=dtype, delimiter=self.delimiter,
                                  comments="#", skiprows=self.header_line, usecols=cols,
                                  ndmin=1, encoding="utf-8-sig", quotechar='"')
        except UnicodeDecodeError:
            raise InputError(self.source, "cannot read file: not UTF-8 text") from None
        except (ValueError, IndexError):
            return self._scan(wanted, integer)
        if data.size == 0:
            raise InputError(self.source, "no data rows")
        # views into one record array: no copy of a 10^7-row column
        return {n: data[f"c{order.index(n)}"] for n in wanted}

    def _lines(self):
        """(line number, fields) of every data row, streamed."""
        with open(self.path, encoding="utf-8-sig", newline=None) as f:
            for no, raw in enumerate(f, 1):
                if no <= self.header_line:
                    continue
                text = raw.strip()
                if not text or text.startswith("#"):
                    continue
                yield no, [_unquote(x) for x in _split(text, self.delimiter)]

    def _scan(self, wanted, integer):
        """The exact line-by-line pass: the first bad row or field raises
        InputError at file:line:column; otherwise the columns, held as
        compact arrays (no strings)."""
        cols = [self.names.index(n) for n in wanted]
        out = {n: array("q" if n in integer else "d") for n in wanted}
        width = len(self.names)
        for no, fields in self._lines():
            if len(fields) != width:
                raise InputError(self.source, f"expected {width} fields as in the header, "
                                 f"found {len(fields)}", no)
            for n, j in zip(wanted, cols):
                out[n].append(parse_field(self.source, no, j + 1, n, fields[j],
                                          integer=n in integer))
        if not len(out[wanted[0]]):
            raise InputError(self.source, "no data rows")
        return {n: np.frombuffer(a, dtype=np.int64 if n in integer else np.float64).copy()
                for n, a in out.items()}

    def where(self, row, name):
        """(line, column, field text) of data row ``row`` (0-based) and a
        column, found by one streaming pass."""
        j = self.names.index(name)
        for k, (no, fields) in enumerate(self._lines()):
            if k == row:
                return no, j + 1, fields[j] if j < len(fields) else ""
        return None, j + 1, ""


def _split(text, delimiter):
    return [x.strip() for x in text.split(delimiter)] if delimiter else text.split()


def _unquote(text):
    text = text.strip()
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'":
        return text[1:-1].strip()
    return text


def parse_field(src, line, col, name, text, integer=False):
    """One field: an int for an integer column, otherwise a float (range
    checks come later, on whole columns)."""
    def bad(message):
        return InputError(src, f"column '{name}': {message}", line, col)
    if integer:
        if not _INT.match(text):
            raise bad(f"{text!r} is not an integer label")
        return int(text)
    try:
        return float(text)
    except ValueError:
        hint = " (a decimal comma? write a decimal point)" if re.fullmatch(
            r"[+-]?\d+,\d+", text) else ""
        raise bad(f"{text!r} is not a number{hint}") from None


def warn_ignored(table, used):
    """One line on stderr for every column that is not used."""
    for j, name in enumerate(table.names, 1):
        if name not in used:
            label = f"'{name}'" if name else f"{j} (no name)"
            print(f"{table.source}: ignoring column {label}", file=sys.stderr)
