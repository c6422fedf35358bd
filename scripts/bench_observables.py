"""Benchmark: the observables n, chi and <q^2> on the 400-point scan of
scripts/bench_scan.py (degree-40 model, up to 100 cancelled digits), through
``signfree run`` (wall time, process start included), beside the same run
without observables; and 21 points on the imaginary axis.

    python scripts/bench_observables.py [--points 400] [--depth 100]

Statistical errors: the propagated fit covariance (the input has per-point
errors and no replicas), so the central model's derivative rows go up to
degree 40 + 2.
"""
import argparse
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "scripts"))

from bench_scan import HALF_RANGE, S2, V, write_input  # noqa: E402


def timed(cmd, env):
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True, env=env)
    if res.returncode:
        sys.exit(res.stderr)
    return time.perf_counter() - t0


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=400)
    ap.add_argument("--depth", type=float, default=100.0)
    a = ap.parse_args()
    mu_max = math.sqrt(2 * math.log(10) * a.depth / (V * S2))
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "bench.csv"
        write_input(src, HALF_RANGE)
        base = [sys.executable, "-m", "signfree", "run", str(src), "--degree", "40",
                "--errors", "covariance", "--quiet"]
        spec = f"0:{mu_max:.6f}:{a.points}"
        timed(base + ["--mu", spec, "--out", str(Path(tmp) / "warm")], env)   # rules cached
        plain = timed(base + ["--mu", spec, "--out", str(Path(tmp) / "a")], env)
        full = timed(base + ["--mu", spec, "--observables", "n,chi,q^2",
                             "--out", str(Path(tmp) / "b")], env)
        imag = timed(base + ["--mu", "0:0.2i:21", "--observables", "n,chi",
                             "--out", str(Path(tmp) / "c")], env)
    print(f"{a.points}-point scan to {a.depth:g} cancelled digits, degree 40:")
    print(f"  without observables      {plain:6.2f} s")
    print(f"  with n, chi, <q^2>       {full:6.2f} s")
    print(f"21 points on the imaginary axis (0 to 0.2i), n and chi: {imag:6.2f} s")


if __name__ == "__main__":
    main()
