"""Benchmark: two-phase data through ``signfree run`` (wall time, process
start included): Robbins-Monro-like slopes with replicas of two Gaussians
at -+c (a valley of about c^2/2 nats), a scan of mu through many zeros of Z,
with --model auto (jackknife errors, every model refitted per replica), and
the rational and two-component models asked for by name; beside the
largest deviation of an ok row from the exact exp(-mu^2/2) cos(c mu)
(Gradshteyn & Ryzhik 3.896.4) in units of its stated total error.

    python scripts/bench_twophase.py [--points 101] [--c 10] [--replicas 8]
"""
import argparse
import csv
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent


def write_input(path, c, replicas, seed=0, width=0.25, noise=1e-2):
    rng = np.random.default_rng(seed)
    half = c + 6
    q = np.arange(-half + width / 2, half, width)

    def lnrho(x):
        return np.logaddexp(-(x - c) ** 2 / 2, -(x + c) ** 2 / 2)

    mean = (lnrho(q + width / 2) - lnrho(q - width / 2)) / width
    with open(path, "w") as f:
        f.write("# kind: slopes\nreplica,q,width,slope\n")
        for r in range(1, replicas + 1):
            for x, s in zip(q, mean + rng.normal(0, noise, q.size)):
                f.write(f"{r},{float(x)!r},{width!r},{float(s)!r}\n")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=101)
    ap.add_argument("--c", type=float, default=10.0)
    ap.add_argument("--replicas", type=int, default=8)
    ap.add_argument("--top", type=float, default=3.0)
    a = ap.parse_args()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "two_phase.csv"
        write_input(src, a.c, a.replicas)
        for model in ("auto", "rational", "two-component", "chebyshev"):
            out = Path(tmp) / f"out-{model}"
            cmd = [sys.executable, "-m", "signfree", "run", str(src), "--mu",
                   f"0:{a.top}:{a.points}", "--model", model, "--out", str(out), "--quiet"]
            t0 = time.perf_counter()
            res = subprocess.run(cmd, capture_output=True, text=True, env=env)
            wall = time.perf_counter() - t0
            if res.returncode:
                sys.exit(res.stderr)
            rows = list(csv.DictReader(open(out / "results.csv")))
            statuses = {}
            worst = 0.0
            for r in rows:
                statuses[r["status"]] = statuses.get(r["status"], 0) + 1
                if r["status"] == "ok":
                    mu = float(r["mu"])
                    exact = math.exp(-mu * mu / 2) * math.cos(a.c * mu)
                    total = sum(float(r[k] or 0) for k in ("quad_err", "model_err", "edge_err")) \
                        + 3 * float(r["avg_phase_err"] or 0)
                    worst = max(worst, abs(float(r["avg_phase"]) - exact) / total)
            label = rows[0]["degree"]
            print(f"--model {model:13s} ({label}): {a.points} mu points, {a.replicas} replicas "
                  f"(jackknife): {wall:6.2f} s wall; statuses {statuses}; largest |ok - exact| "
                  f"/ total error {worst:.2f}")


if __name__ == "__main__":
    main()
