#!/usr/bin/env python
"""Wall time of a sweep: the rotor study of data/volumes/ (two couplings x
three volumes, 8 replicas of LLR slopes each, 1000 bootstrap resamples
refitted and integrated per ensemble, 30 digits) over a 161-point mu scan, through ``signfree sweep`` on 1 and 2 local processes,
and on a dask.distributed LocalCluster of 2 single-threaded workers when
dask is installed (signfree[cluster]). Each run starts from an empty output
folder; the Gauss-Legendre rules are cached by a first run.

    python scripts/bench_sweep.py
"""
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
MANIFEST = ROOT / "data" / "volumes" / "manifest.csv"
MU = "0:1.6:161"
ANALYSIS = ["--errors", "bootstrap", "--bootstrap", "1000", "--seed", "1", "--digits", "30"]


def sweep(out, *extra):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    start = time.perf_counter()
    res = subprocess.run([sys.executable, "-m", "signfree", "sweep", str(MANIFEST), "--mu", MU,
                          "--out", str(out), "--quiet", *ANALYSIS, *extra], capture_output=True, text=True,
                         env=env)
    if res.returncode != 0:
        sys.exit(res.stderr)
    return time.perf_counter() - start


def main():
    work = Path(tempfile.mkdtemp(prefix="signfree-bench-"))
    try:
        sweep(work / "warm", "--jobs", "1")
        for jobs in (1, 2):
            t = sweep(work / f"jobs{jobs}", "--jobs", str(jobs))
            print(f"6 ensembles x {MU.split(':')[2]} mu, {jobs} local process(es): {t:.1f} s")
        t = sweep(work / "resume", "--jobs", "1")
        t = sweep(work / "resume", "--jobs", "1")
        print(f"re-run of a complete sweep (all skipped, tables rebuilt): {t:.1f} s")
        try:
            from distributed import LocalCluster
        except ImportError:
            print("dask.distributed not installed: no cluster timing")
            return
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                          dashboard_address=None) as cluster:
            t = sweep(work / "cluster", "--scheduler", cluster.scheduler_address)
            print(f"same sweep on a LocalCluster of 2 workers (already started): {t:.1f} s")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
