"""Writing a run's files: results.csv (one row per mu), summary.json
(provenance and how the model was chosen), figures, the report page.

Rules: nothing is written until everything has been computed; a new folder
is assembled under a temporary name and renamed into place as a whole; an
existing folder is written into only when it is empty or when the caller
says ``force`` (then every file goes to a temporary name first and all are
renamed at once, with Ctrl-C held back during the renames); files get the
ordinary permissions of the user's umask (never 0600)."""
import csv
import hashlib
import io
import json
import os
import shutil
import signal
import sys
import tempfile
import threading
import time
from contextlib import contextmanager
from pathlib import Path

from signfree.errors import OutputError


def file_sha256(path):
    """The sha256 of an input's file (for ``data.h5:/run/q``, of data.h5)."""
    from signfree.io.tables import file_of
    h = hashlib.sha256()
    with open(file_of(path), "rb") as f:
        for block in iter(lambda: f.read(1 << 16), b""):
            h.update(block)
    return h.hexdigest()


def package_versions():
    """Versions of signfree and of the libraries its numbers depend on."""
    from importlib import metadata
    out = {"python": sys.version.split()[0]}
    for name in ("signfree", "numpy", "scipy", "mpmath", "python-flint", "gmpy2", "matplotlib"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def csv_text(columns, records):
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(columns), lineterminator="\n")
    writer.writeheader()
    writer.writerows(records)
    return buf.getvalue()


def json_text(obj):
    return json.dumps(obj, indent=2, sort_keys=False, default=_jsonable) + "\n"


def _jsonable(x):
    try:
        import numpy as np
        if isinstance(x, np.generic):
            return x.item()
    except ImportError:  # pragma: no cover
        pass
    return str(x)


def new_folder_name(prefix="signfree-run"):
    """A folder name ``prefix-YYYYmmdd-HHMMSS`` (with ``-2``, ``-3``, ... when
    taken) in the current folder."""
    stamp = time.strftime("%Y%m%d-%H%M%S")
    name = f"{prefix}-{stamp}"
    k = 1
    while os.path.lexists(name):
        k += 1
        name = f"{prefix}-{stamp}-{k}"
    return Path(name)


def check_output_folder(folder, force=False):
    """Raise :class:`OutputError` unless ``folder`` can receive a run's files:
    it does not exist yet, or it is an empty folder, or it is a folder and
    ``force`` is set. Called before any computation, and again when writing."""
    folder = Path(folder)
    if not os.path.lexists(folder):
        parent = folder.absolute().parent
        while not parent.exists():
            parent = parent.parent
        if not parent.is_dir() or not os.access(parent, os.W_OK | os.X_OK):
            raise OutputError(folder, f"cannot create the output folder: {parent} is not a "
                              "writable folder")
        return folder
    if not folder.is_dir():
        raise OutputError(folder, "exists and is not a folder; choose another --out")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(folder, "the output folder is not writable")
    if not force and any(True for _ in folder.iterdir()):
        raise OutputError(folder, "the output folder exists and is not empty; choose "
                          "another --out, or add --force to replace files of the same names")
    return folder


def _mode(kind):
    """Ordinary permissions under the current umask: 0666 & ~umask for
    files, 0777 & ~umask for folders."""
    mask = os.umask(0)
    os.umask(mask)
    return (0o777 if kind == "folder" else 0o666) & ~mask


@contextmanager
def _interrupts_held():
    """Hold SIGINT back while a few renames complete, then deliver it (only
    in the main thread; elsewhere the renames are simply done)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    old = signal.signal(signal.SIGINT, lambda *a: caught.append(a))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, old)
        if caught:
            raise KeyboardInterrupt


def _write(path, data):
    with open(path, "wb" if isinstance(data, (bytes, bytearray)) else "w",
              encoding=None if isinstance(data, (bytes, bytearray)) else "utf-8") as f:
        f.write(data)


def write_files(folder, files, force=False):
    """Write ``files`` (relative name -> text or bytes; a name may hold
    subfolders, 'a/results.csv') into ``folder``, all or nothing.

    A new folder is filled under a temporary name beside it and renamed into
    place. An existing folder must be empty unless ``force``; every file is
    then written to a temporary name next to its target and all are renamed
    at once. Raises :class:`OutputError` when the folder cannot take the
    files; nothing is left behind."""
    folder = Path(folder)
    check_output_folder(folder, force)
    try:
        if not os.path.lexists(folder):
            return _write_new(folder, files)
        return _write_into(folder, files)
    except OSError as exc:
        raise OutputError(folder, f"cannot write: {exc.strerror or exc}") from None


def _write_new(folder, files):
    parent = folder.absolute().parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.", dir=parent))
    try:
        for name, data in files.items():
            path = tmp / name
            if path.parent != tmp:
                path.parent.mkdir(parents=True, exist_ok=True)
            _write(path, data)
        os.chmod(tmp, _mode("folder"))
        with _interrupts_held():
            os.rename(tmp, folder)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return folder


def _write_into(folder, files):
    targets = [folder / name for name in files]
    for path in targets:
        if path.is_dir():
            raise OutputError(path, "is a folder; cannot write a file there")
    staged, made = [], []
    mode = _mode("file")
    try:
        for path, data in zip(targets, files.values()):
            missing = [p for p in [path.parent, *path.parent.parents]
                       if p != folder and folder in p.parents and not p.exists()]
            for p in reversed(missing):
                p.mkdir()
                made.append(p)
            fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
            os.close(fd)
            staged.append((tmp, path))
            _write(tmp, data)
            os.chmod(tmp, mode)
        with _interrupts_held():
            for tmp, path in staged:
                os.replace(tmp, path)
    except BaseException:
        for tmp, _ in staged:
            if os.path.lexists(tmp):
                os.unlink(tmp)
        for p in reversed(made):
            try:
                p.rmdir()
            except OSError:
                pass
        raise
    return folder
