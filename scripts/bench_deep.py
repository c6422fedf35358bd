"""Benchmark at large volume: a 400-point mu scan of a near-Gaussian density
with V = 10^5 reaching 1500 cancelled orders, through ``signfree run`` (wall
time and peak memory of the process, first run with an empty rule cache and
a second run with it filled).

    python scripts/bench_deep.py [--points 400] [--depth 1500] [--volume 100000]

The density is ln rho = -q^2/(2 V) - g q^4 / V^3 (g = 0.02), measured as ln rho
on 401 points of q in +-90 sqrt(V), where rho has fallen below 10^-1700 of its
peak, with errors 1e-9, as a Wang-Landau run would report it; the degree is
chosen from the errors. On the real axis this scan needs about 5000 digits of
working precision and thousands of nodes; along the path through the saddle
(signfree.engine.paths) the precision stays near the wanted digits.
"""
import argparse
import csv
import math
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
G = 0.02


def write_input(path, volume, n=401, reach=90.0):
    half = reach * math.sqrt(volume)
    with open(path, "w") as f:
        f.write(f"# kind: log_density\n# volume: {volume}\n# symmetry: even\n")
        f.write("q,log_density,log_density_err\n")
        for i in range(n):
            q = -half + 2 * half * i / (n - 1)
            f.write(f"{q!r},{-q * q / (2 * volume) - G * q ** 4 / volume ** 3!r},1e-9\n")


def run(cmd, env):
    """(wall seconds, CPU seconds, peak resident MB of the largest child so
    far, stdout) of one command."""
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    if res.returncode:
        sys.exit(res.stderr)
    cpu = r1.ru_utime + r1.ru_stime - r0.ru_utime - r0.ru_stime
    return wall, cpu, r1.ru_maxrss / 1024.0, res.stdout


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=400)
    ap.add_argument("--depth", type=float, default=1500.0)
    ap.add_argument("--volume", type=float, default=1e5)
    a = ap.parse_args()
    volume = int(a.volume)
    # mu_max from the Gaussian estimate D = mu^2 V / (2 ln 10), 1% over the depth
    mu_max = math.sqrt(2 * math.log(10) * a.depth * 1.01 / volume)
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "deep.csv"
        write_input(src, volume)
        env = dict(os.environ, PYTHONPATH=str(ROOT), SIGNFREE_CACHE=str(Path(tmp) / "rules"))
        for label in ("first run, empty rule cache", "second run"):
            out = Path(tmp) / label.split(",")[0].replace(" ", "-")
            cmd = [sys.executable, "-m", "signfree", "run", str(src), "--mu",
                   f"0:{mu_max:.6f}:{a.points}", "--errors", "none", "--out", str(out), "--quiet"]
            wall, cpu, mem, stdout = run(cmd, env)
            rows = list(csv.DictReader(open(out / "results.csv")))
            depth = max(float(r["cancel_orders"]) for r in rows if r["status"] == "ok")
            counts = {s: sum(r["status"] == s for r in rows) for s in {r["status"] for r in rows}}
            line = next((ln for ln in stdout.splitlines() if ln.startswith("integration")), "")
            print(f"{label}: {a.points} mu points, V = {volume}, ok rows down to {depth:.0f} "
                  f"cancelled orders: {wall:.2f} s wall, {cpu:.2f} s CPU, peak memory {mem:.0f} MB, "
                  f"statuses {counts}")
            print(f"  {line}")


if __name__ == "__main__":
    main()
