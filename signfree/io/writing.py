"""Writing a run's files: results.csv (one row per mu), summary.json
(provenance and how the model was chosen). Every file is written to a
temporary name in the target folder and renamed into place, so a reader
never sees a half-written file; a new folder is assembled under a temporary
name and renamed as a whole."""
import csv
import hashlib
import io
import json
import os
import sys
import tempfile
import time
from pathlib import Path


def file_sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as f:
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
    stamp = time.strftime("%Y%m%d-%H%M%S")
    name = f"{prefix}-{stamp}"
    k = 1
    while os.path.exists(name):
        k += 1
        name = f"{prefix}-{stamp}-{k}"
    return Path(name)


def write_files(folder, files):
    """Write ``files`` (name -> text or bytes) into ``folder`` atomically:
    into an existing folder file by file (temporary name, then rename), or
    as a whole new folder renamed into place."""
    folder = Path(folder)
    if folder.exists():
        if not folder.is_dir():
            raise NotADirectoryError(f"{folder} exists and is not a folder")
        for name, data in files.items():
            _write_atomic(folder / name, data)
        return folder
    parent = folder.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.", dir=parent))
    try:
        for name, data in files.items():
            mode = "wb" if isinstance(data, bytes) else "w"
            with open(tmp / name, mode) as f:
                f.write(data)
        os.chmod(tmp, 0o755)
        os.rename(tmp, folder)
    except BaseException:
        for p in tmp.glob("*"):
            p.unlink()
        tmp.rmdir()
        raise
    return folder


def _write_atomic(path, data):
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "wb" if isinstance(data, bytes) else "w") as f:
            f.write(data)
        os.replace(tmp, path)
    except BaseException:
        os.unlink(tmp)
        raise
