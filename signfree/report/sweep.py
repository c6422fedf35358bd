"""Sweeps: the ensembles of a manifest analysed on local processes or on a
Dask cluster, one folder per ensemble, combined tables keyed by the labels,
and the infinite-volume limit of every group of ensembles that differ only
in their volume.

    result = run_sweep("manifest.csv", "0:2:41", "sweep-out", jobs=2)
    result = run_sweep("manifest.csv", "0:2:41", "sweep-out", executor=client)

``executor`` is anything with ``submit(fn, arg)`` returning futures: a
``concurrent.futures`` executor or a ``distributed.Client`` (whose futures
interface matches it). The output folder holds

    sweep.json           what the sweep was asked (checked when it is resumed)
    ensembles/NAME/      results.csv, summary.json, delta_f.csv of one ensemble
    ensembles.csv, sweep.csv, per_volume.csv, infinite_volume.csv, report.html,
    fig_volumes*.png/pdf (see :mod:`signfree.report.collect`)

Each ensemble folder is assembled under a temporary name and renamed into
place when complete, by this process alone (workers return text), so an
interrupted sweep leaves no half-written folder; a re-run with the same
options skips every ensemble whose folder is complete and whose input is
unchanged. A failing ensemble is recorded, not fatal.
"""
import json
import os
import queue
import shutil
import tempfile
import threading
import time
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from pathlib import Path

from signfree.analysis.settings import Settings, parse_mu_spec
from signfree.analysis.volumes import POINT_COLUMNS, free_energy_points, point_records
from signfree.io.writing import csv_text, file_sha256, json_text, write_files
from signfree.report.collect import ENSEMBLES, write_combined
from signfree.report.manifest import Manifest, read_manifest
from signfree.report.outputs import analyse_file

REQUEST_FILE = "sweep.json"


class SweepInterrupted(KeyboardInterrupt):
    """An interrupted sweep: ``done`` ensembles are complete on disk."""

    def __init__(self, done, total):
        super().__init__(f"{done} of {total} ensembles complete")
        self.done, self.total = done, total


@dataclass
class SweepResult:
    """What a sweep did: per ensemble name its outcome ('done', 'failed' or
    'skipped' as complete from an earlier run) and failure text, the
    infinite-volume limits by group, and the files written at the top."""

    out: Path
    manifest: Manifest
    outcomes: dict
    failures: dict
    mu_spec: str = None
    limits: dict = field(default_factory=dict)
    notes: dict = field(default_factory=dict)
    files: list = field(default_factory=list)

    @property
    def failed(self):
        return [n for n, o in self.outcomes.items() if o == "failed"]


# ---------------------------------------------------------------------------
# one ensemble (runs in a worker)

def analyse_ensemble(job):
    """Analyse one ensemble; returns plain data (it crosses process and
    machine boundaries): {'name', 'ok', 'files' or 'failure', 'seconds'}.
    A failure of any kind is returned, not raised."""
    start = time.perf_counter()
    try:
        result, files = analyse_file(job["path"], job["mu"], job["settings"], kind=job["kind"],
                                     volume=job["volume"], symmetry=job["symmetry"])
        if result.table.volume is not None:
            points = free_energy_points(result.table)
            files["delta_f.csv"] = csv_text(POINT_COLUMNS, point_records(points))
        if job["plots"]:
            from signfree.report.figures import figures_files
            files.update(figures_files(result))
        return {"name": job["name"], "ok": True, "files": files,
                "seconds": time.perf_counter() - start}
    except Exception as exc:  # noqa: BLE001 -- recorded in the combined table
        return {"name": job["name"], "ok": False, "failure": failure_text(exc),
                "seconds": time.perf_counter() - start}


def failure_text(exc):
    """One line: the message of bad input, else the kind of error too."""
    from signfree.errors import InputError
    text = str(exc).strip().replace("\n", " ")
    if isinstance(exc, (InputError, ValueError, OSError)):
        return text or type(exc).__name__
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


# ---------------------------------------------------------------------------
# the output folder

def request_of(mu_spec, settings, kind=None, symmetry=None, plots=False):
    """What determines the files of an ensemble (recorded in sweep.json)."""
    opts = asdict(settings)
    opts.pop("volume_order")  # only the combined limit depends on it
    return {"mu": mu_spec, "settings": opts, "kind": kind, "symmetry": symmetry,
            "plots": bool(plots)}


def check_folder(out, request):
    """Check that ``out`` is new, empty, or holds a sweep asked the same way;
    raises ValueError otherwise."""
    out = Path(out)
    record = out / REQUEST_FILE
    if not out.exists():
        return
    if not out.is_dir():
        raise ValueError(f"{out} exists and is not a folder")
    if not record.exists():
        if any(out.iterdir()):
            raise ValueError(f"{out} exists and is not a sweep folder; choose another "
                             "output folder")
        return
    try:
        before = json.loads(record.read_text())
    except (OSError, ValueError):
        raise ValueError(f"{record} cannot be read; choose another output folder") from None
    now = json.loads(json_text(request))
    diff = sorted(k for k in now if now[k] != before.get(k))
    if diff:
        raise ValueError(f"{out} holds a sweep made with other options ({', '.join(diff)}); "
                         "choose another output folder")


def prepare_folder(out, request):
    """Create the sweep folder (or reuse one that :func:`check_folder`
    accepts) with its sweep.json and ensembles/."""
    out = Path(out)
    check_folder(out, request)
    write_files(out, {REQUEST_FILE: json_text(request)}, force=True)  # checked above
    (out / ENSEMBLES).mkdir(exist_ok=True)
    return out


def is_complete(folder, ensemble):
    """True when the folder holds the files of a finished analysis of the
    ensemble's input as it is now."""
    try:
        summary = json.loads((folder / "summary.json").read_text())
        if not (folder / "results.csv").is_file():
            return False
        return summary["input"]["sha256"] == file_sha256(ensemble.path)
    except (OSError, ValueError, KeyError, TypeError):
        return False


def _clear_leftovers(base, names):
    """Remove temporary folders an interrupted run may have left (only names
    this module makes: '.NAME.' prefixes of the sweep's ensembles)."""
    for p in base.iterdir():
        if p.is_dir() and p.name.startswith(".") and \
                any(p.name.startswith(f".{n}.") for n in names):
            shutil.rmtree(p, ignore_errors=True)


def _store(base, name, files):
    """Write an ensemble folder atomically, replacing an out-of-date one by
    two renames (there is never a half-written folder under the name)."""
    target = base / name
    if not target.exists():
        write_files(target, files)
        return
    fresh = Path(tempfile.mkdtemp(prefix=f".{name}.new-", dir=base))
    fresh.rmdir()
    write_files(fresh, files)
    old = Path(tempfile.mkdtemp(prefix=f".{name}.old-", dir=base))
    old.rmdir()
    os.rename(target, old)
    os.rename(fresh, target)
    shutil.rmtree(old, ignore_errors=True)


# ---------------------------------------------------------------------------
# where the work runs

class _Inline:
    """Runs each job in this process, one after the other (no futures)."""


@contextmanager
def _pool(jobs, scheduler, executor):
    """The executor of a sweep: the one given, a Dask client of a scheduler
    address or file (closed afterwards), local processes (ended at once on
    an interruption), or work in this process for one job."""
    if executor is not None:
        yield executor
        return
    if scheduler:
        client = connect(scheduler)
        try:
            yield client
        finally:
            client.close()
        return
    if jobs > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor
        pool = ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("spawn"))
        try:
            yield pool
        except BaseException:
            _stop_processes(pool)
            raise
        else:
            pool.shutdown(wait=True)
        return
    yield _Inline()


def _stop_processes(pool):
    """Cancel what is queued and end the worker processes at once (their
    work is lost, never half-written: only this process writes)."""
    if hasattr(pool, "terminate_workers"):      # Python 3.14 and later
        pool.terminate_workers()
        return
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        proc.terminate()


def connect(scheduler, timeout="15s"):
    """A ``distributed.Client`` of a scheduler address (tcp://host:8786) or
    of a scheduler file (JSON, as ``dask scheduler --scheduler-file`` and
    dask-mpi write); ValueError with the reason when it fails."""
    try:
        from distributed import Client
    except ImportError:
        raise ValueError("a scheduler needs dask.distributed: pip install "
                         "'signfree[cluster]'") from None
    try:
        if os.path.isfile(scheduler):
            return Client(scheduler_file=scheduler, timeout=timeout)
        return Client(scheduler, timeout=timeout)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ValueError(f"cannot reach the scheduler {scheduler}: {exc}") from None


def _is_dask(executor):
    return type(executor).__module__.split(".")[0] == "distributed"


def _outcomes(executor, jobs, progress):
    """Yield each job's outcome as it finishes (in any order)."""
    if isinstance(executor, _Inline):
        progress.running = lambda: 1
        for job in jobs:
            yield analyse_ensemble(job)
        return
    done = queue.Queue()
    futures = {}
    dask = _is_dask(executor)
    for job in jobs:
        fut = (executor.submit(analyse_ensemble, job, pure=False) if dask
               else executor.submit(analyse_ensemble, job))
        futures[fut] = job["name"]
        fut.add_done_callback(done.put)
    progress.running = _running_counter(executor, futures, dask)
    try:
        for _ in range(len(futures)):
            fut = done.get()
            try:
                outcome = fut.result()
            except (KeyboardInterrupt, SystemExit):
                raise
            except BaseException as exc:  # noqa: BLE001 -- a worker died, was lost or cancelled
                outcome = {"name": futures[fut], "ok": False, "seconds": None,
                           "failure": "the worker running it was lost: " + failure_text(exc)}
            futures.pop(fut)
            yield outcome
    except BaseException:
        for fut in list(futures):
            fut.cancel()
        raise


def _running_counter(executor, futures, dask):
    if dask:
        def count():
            try:
                keys = {f.key for f in list(futures)}
                return sum(len(keys.intersection(ks)) for ks in
                           executor.processing().values())
            except Exception:  # noqa: BLE001 -- the display only
                return None
        return count
    # a process pool marks the calls queued for its workers as running too
    cap = getattr(executor, "_max_workers", None) or len(futures) or 1
    return lambda: min(cap, sum(1 for f in list(futures) if f.running()))


# ---------------------------------------------------------------------------
# progress

def _duration(seconds):
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


class SweepProgress:
    """Ensembles done, failed, running and waiting, and the time left
    estimated from this run's rate of finished ensembles. On a terminal one
    line refreshed twice a second; elsewhere (a batch job's log) one line per
    finished ensemble. ``stream`` None shows nothing."""

    def __init__(self, total, skipped, stream=None):
        self.total, self.skipped = total, skipped
        self.done = self.failed = 0
        self.start = time.time()
        self.stream = stream
        self.running = lambda: 0
        self.tty = bool(stream is not None and getattr(stream, "isatty", lambda: False)())
        self._stop = threading.Event()
        self._thread = None
        if self.tty:
            self._thread = threading.Thread(target=self._loop, daemon=True)
            self._thread.start()

    @property
    def waiting(self):
        return self.total - self.skipped - self.done - self.failed

    def line(self):
        finished = self.done + self.failed
        elapsed = time.time() - self.start
        running = self.running()
        parts = [f"{self.done + self.skipped}/{self.total} done"]
        if self.skipped:
            parts[0] += f" ({self.skipped} from before)"
        parts.append(f"{self.failed} failed")
        if running is not None:
            parts.append(f"{running} running")
        left = self.waiting
        if left == 0:
            eta = f"finished in {_duration(elapsed)}"
        elif finished == 0:
            eta = f"{_duration(elapsed)} elapsed, time left not known yet"
        else:
            eta = f"about {_duration(left * elapsed / finished)} left"
        return "sweep: " + ", ".join(parts) + "; " + eta

    def finished(self, name, ok, failure=None):
        if ok:
            self.done += 1
        else:
            self.failed += 1
        if self.stream is None:
            return
        if self.tty:
            self._show()
        else:
            what = "done" if ok else f"FAILED ({failure})"
            self.stream.write(f"{name}: {what}; {self.line()}\n")
            self.stream.flush()

    def _show(self):
        self.stream.write("\r\033[K" + self.line())
        self.stream.flush()

    def _loop(self):
        while not self._stop.wait(0.5):
            self._show()

    def close(self):
        if self._thread is not None:
            self._stop.set()
            self._thread.join()
            self._show()
            self.stream.write("\n")
            self.stream.flush()


# ---------------------------------------------------------------------------
# the sweep

def run_sweep(manifest, mu_spec, out, settings=None, kind=None, symmetry=None, plots=False,
              jobs=1, scheduler=None, executor=None, progress=None):
    """Analyse every ensemble of ``manifest`` (a path or a
    :class:`~signfree.report.manifest.Manifest`) over the mu of ``mu_spec``
    into ``out``, then write the combined tables, the infinite-volume limits
    and the report page. ``jobs`` local processes, or a Dask ``scheduler``
    address or file, or any ``executor``; ``progress`` a stream for the
    progress display (None: silent). Raises InputError or ValueError before
    anything is written, and :class:`SweepInterrupted` on an interruption
    (complete ensembles stay)."""
    settings = settings if settings is not None else Settings()
    if not isinstance(manifest, Manifest):
        manifest = read_manifest(manifest)
    parse_mu_spec(mu_spec)
    if jobs < 1:
        raise ValueError(f"--jobs {jobs}: expected at least 1")
    request = request_of(mu_spec, settings, kind, symmetry, plots)
    check_folder(out, request)
    names = [e.name for e in manifest.ensembles]
    outcomes, failures = {}, {}
    with _pool(jobs, scheduler, executor) as pool:
        out = prepare_folder(out, request)
        base = out / ENSEMBLES
        _clear_leftovers(base, names)
        to_run = []
        for e in manifest.ensembles:
            if is_complete(base / e.name, e):
                outcomes[e.name] = "skipped"
                continue
            volume = e.volume or settings.volume
            to_run.append({"name": e.name, "path": str(e.path), "mu": mu_spec,
                           "settings": settings.with_(volume=volume), "kind": e.kind or kind,
                           "volume": volume, "symmetry": e.symmetry or symmetry,
                           "plots": bool(plots)})
        display = SweepProgress(len(names), len(outcomes), progress)
        try:
            for outcome in _outcomes(pool, to_run, display):
                name = outcome["name"]
                if outcome["ok"]:
                    _store(base, name, outcome["files"])
                    outcomes[name] = "done"
                else:
                    outcomes[name] = "failed"
                    failures[name] = outcome["failure"]
                display.finished(name, outcome["ok"], outcome.get("failure"))
        except KeyboardInterrupt:
            display.close()
            complete = sum(1 for o in outcomes.values() if o != "failed")
            raise SweepInterrupted(complete, len(names)) from None
        display.close()
    result = SweepResult(out, manifest, {n: outcomes[n] for n in names}, failures, mu_spec)
    write_combined(result, settings.volume_order)
    return result


def default_jobs():
    """The cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover -- not on Linux
        return os.cpu_count() or 1

