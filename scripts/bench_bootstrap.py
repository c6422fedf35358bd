"""Benchmark at bootstrap scale: 200 bootstrap replicas x 400 mu x degree 40
with up to 100 cancelled digits, every replica refitted and integrated in
one batch (``signfree run --errors bootstrap --bootstrap 200``), wall and
CPU time with process start, first with an empty rule cache, then with it
filled.

    python scripts/bench_bootstrap.py [--replicas 200] [--points 400] [--depth 100]

The input is a ln rho measurement of a Gaussian-plus-quartic density (V =
1000, as in bench_scan.py) repeated 16 times with independent noise of sd
1e-12, as a Wang-Landau run repeated on 16 seeds would give.
"""
import argparse
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_scan import HALF_RANGE, S2, V, lnrho  # noqa: E402  (the same density)


def _child_cpu():
    """User plus system CPU seconds of the finished child processes (less
    sensitive than wall time to other work on a shared machine)."""
    import resource
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicas", type=int, default=200)
    ap.add_argument("--points", type=int, default=400)
    ap.add_argument("--depth", type=float, default=100.0)
    a = ap.parse_args()
    mu_max = math.sqrt(2 * math.log(10) * a.depth / (V * S2))
    half_range = HALF_RANGE
    rng = np.random.default_rng(2024)
    q = np.linspace(-half_range, half_range, 241)
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "wl.csv"
        with open(src, "w") as f:
            f.write(f"# kind: log_density\n# volume: {V}\n# symmetry: even\n")
            f.write("replica,q,log_density\n")
            for r in range(16):
                y = lnrho(q) + 1e-12 * rng.standard_normal(len(q))
                f.writelines(f"{r + 1},{float(x)!r},{float(v)!r}\n" for x, v in zip(q, y))
        # an empty rule cache for the first run, filled for the second
        env = dict(os.environ, PYTHONPATH=str(ROOT), SIGNFREE_CACHE=str(Path(tmp) / "rules"))
        for label in ("first run, empty rule cache", "second run"):
            out = Path(tmp) / label.split(",")[0].replace(" ", "-")
            cmd = [sys.executable, "-m", "signfree", "run", str(src), "--mu",
                   f"0:{mu_max:.6f}:{a.points}", "--degree", "40", "--errors", "bootstrap",
                   "--bootstrap", str(a.replicas), "--seed", "1", "--out", str(out), "--quiet"]
            t0, c0 = time.perf_counter(), _child_cpu()
            res = subprocess.run(cmd, capture_output=True, text=True, env=env)
            wall, cpu = time.perf_counter() - t0, _child_cpu() - c0
            if res.returncode:
                sys.exit(res.stderr)
            line = next(ln for ln in res.stdout.splitlines() if ln.startswith("integration"))
            print(f"signfree run --errors bootstrap ({label}): {a.replicas} replicas x "
                  f"{a.points} mu x degree 40, up to {a.depth:g} cancelled digits: {wall:.2f} s "
                  f"wall, {cpu:.2f} s CPU (process start included)")
            print(f"  {line}")


if __name__ == "__main__":
    main()
