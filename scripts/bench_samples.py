"""Benchmark: raw samples and large densities through ``signfree run`` (wall
time including process start, and the peak memory of the run).

    python scripts/bench_samples.py [--samples 10000000] [--points 100000]

Inputs, written to a temporary folder first (not timed):
  * a time series of 10^7 integer charges (a topological-charge-like
    lattice charge: a Gaussian of width 30 with autocorrelation time ~5,
    rounded), one column ``q``;
  * the same number of continuous charges with a replica label (8 chains)
    and a weight column;
  * a slopes file of 10^5 intervals.
"""
import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent


def correlated(n, tau, sigma, seed):
    """An AR(1) series with integrated autocorrelation time about tau."""
    from scipy.signal import lfilter
    rng = np.random.default_rng(seed)
    a = (2 * tau - 1) / (2 * tau + 1)
    noise = rng.standard_normal(n) * sigma * np.sqrt(1 - a * a)
    return lfilter([1.0], [1.0, -a], noise)     # x_t = a x_{t-1} + e_t


def write_integer_samples(path, n):
    q = np.rint(correlated(n, 5.0, 30.0, 1)).astype(np.int64)
    with open(path, "w") as f:
        f.write("# kind: samples\n# volume: 1024\nq\n")
        for chunk in np.array_split(q, 20):
            f.write("\n".join(map(str, chunk.tolist())) + "\n")


def write_continuous_samples(path, n, chains=8):
    q = correlated(n, 3.0, 12.0, 2)
    w = np.exp(0.01 * np.random.default_rng(3).standard_normal(n))
    r = np.repeat(np.arange(1, chains + 1), -(-n // chains))[:n]
    with open(path, "w") as f:
        f.write("# kind: samples\nreplica q weight\n")
        for rs, qs, ws in zip(np.array_split(r, 40), np.array_split(q, 40), np.array_split(w, 40)):
            f.write("\n".join(f"{a} {b:.6f} {c:.6f}" for a, b, c in
                              zip(rs.tolist(), qs.tolist(), ws.tolist())) + "\n")


def write_slopes(path, n):
    q = np.linspace(-60.0, 60.0, n)
    w = q[1] - q[0]
    rng = np.random.default_rng(4)
    slope = -q / 25.0 * (1 + 1e-4 * q * q) + 0.05 * rng.standard_normal(n)
    with open(path, "w") as f:
        f.write("# kind: slopes\nq,width,slope,slope_err\n")
        f.write("\n".join(f"{a!r},{float(w)!r},{b!r},0.05" for a, b in zip(q.tolist(),
                                                                    slope.tolist())) + "\n")


CHILD = """
import resource, runpy, sys
sys.argv = ["signfree"] + sys.argv[1:]
try:
    runpy.run_module("signfree", run_name="__main__")
finally:
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    sys.stderr.write(f"\\npeak-kB {peak}\\n")
"""


def run(args, cwd):
    """(wall seconds, peak resident memory in MB) of one signfree run."""
    start = time.perf_counter()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run([sys.executable, "-c", CHILD, "run", *map(str, args), "--quiet"],
                         cwd=cwd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - start
    if res.returncode != 0:
        sys.exit(f"signfree failed:\n{res.stderr}")
    peak = int(res.stderr.rsplit("peak-kB", 1)[1].split()[0])
    return wall, peak / 1024.0


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10 ** 7)
    ap.add_argument("--points", type=int, default=10 ** 5)
    opts = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="signfree-bench-") as tmp:
        tmp = Path(tmp)
        cases = [
            ("integer samples", tmp / "qtop.txt", write_integer_samples, opts.samples),
            ("samples with replica and weight", tmp / "chains.txt", write_continuous_samples,
             opts.samples),
            ("slopes", tmp / "slopes.csv", write_slopes, opts.points),
        ]
        for label, path, writer, n in cases:
            t0 = time.perf_counter()
            writer(path, n)
            made = time.perf_counter() - t0
            size = path.stat().st_size / 1e6
            wall, peak = run([path, "--mu", "0:0.2:21", "--out", tmp / f"out-{path.stem}"], tmp)
            print(f"{label}: {n} rows, {size:.0f} MB file (written in {made:.1f} s); "
                  f"signfree run {wall:.2f} s wall, peak memory {peak:.0f} MB")


if __name__ == "__main__":
    main()
