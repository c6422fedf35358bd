"""Benchmark: a 400-point mu scan of a degree-40 Chebyshev model with up to
100 cancelled digits through ``signfree run`` (wall and CPU time, process
start included; first with an empty rule cache, then with it filled),
beside the time per point of mpmath.quad on the same model and of a
double-precision numpy sum (with its wrong answers).

    python scripts/bench_scan.py [--points 400] [--depth 100]

The density is a Gaussian-plus-quartic ln rho = -q^2/(2 V s2) - g q^4 / V^3
for V = 1000, measured as ln rho on a grid with tiny errors, so that the
fitted degree-40 model is a smooth non-polynomial-like series.
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

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

V, S2, G = 1000, 1.0, 0.02
HALF_RANGE = 23 * math.sqrt(V * S2)   # edge terms near e^-270 relative, below the scan


def lnrho(q):
    return -q * q / (2 * V * S2) - G * q ** 4 / V ** 3


def write_input(path, half_range, n=241):
    with open(path, "w") as f:
        f.write(f"# kind: log_density\n# volume: {V}\n# symmetry: even\n")
        f.write("q,log_density,log_density_err\n")
        for i in range(n):
            q = -half_range + 2 * half_range * i / (n - 1)
            f.write(f"{q!r},{lnrho(q)!r},1e-10\n")


def _child_cpu():
    """User plus system CPU seconds of the finished child processes (less
    sensitive than wall time to other work on a shared machine)."""
    import resource
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=400)
    ap.add_argument("--depth", type=float, default=100.0)
    ap.add_argument("--quad-points", type=int, default=3)
    a = ap.parse_args()
    # mu_max from the Gaussian estimate D = mu^2 V s2 / (2 ln 10), a little
    # under the requested depth because the quartic narrows the density
    mu_max = math.sqrt(2 * math.log(10) * a.depth / (V * S2))
    half_range = HALF_RANGE
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "bench.csv"
        write_input(src, half_range)
        # an empty rule cache for the first run, filled for the second
        env = dict(os.environ, PYTHONPATH=str(ROOT), SIGNFREE_CACHE=str(Path(tmp) / "rules"))
        for label in ("first run, empty rule cache", "second run"):
            out = Path(tmp) / label.split(",")[0].replace(" ", "-")
            cmd = [sys.executable, "-m", "signfree", "run", str(src), "--mu",
                   f"0:{mu_max:.6f}:{a.points}", "--degree", "40", "--errors", "none",
                   "--out", str(out), "--quiet"]
            t0, c0 = time.perf_counter(), _child_cpu()
            res = subprocess.run(cmd, capture_output=True, text=True, env=env)
            wall, cpu = time.perf_counter() - t0, _child_cpu() - c0
            if res.returncode:
                sys.exit(res.stderr)
            rows = list(csv.DictReader(open(out / "results.csv")))
            depth = max(float(r["cancel_orders"]) for r in rows)
            statuses = {r["status"] for r in rows}
            line = next((ln for ln in res.stdout.splitlines() if ln.startswith("integration")), "")
            print(f"signfree run ({label}): {a.points} mu points, degree 40, up to {depth:.1f} "
                  f"cancelled digits: {wall:.2f} s wall, {cpu:.2f} s CPU (process start included), "
                  f"statuses {sorted(statuses)}")
            print(f"  {line}")

    # the same model, integrated point by point with mpmath.quad
    import mpmath
    import numpy as np

    from signfree.models.chebyshev import fit_degree
    from signfree.io.reading import read_density
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "bench.csv"
        write_input(src, half_range)
        model = fit_degree(read_density(src), 40, "even")
    a_, b_ = model.domain
    coef = [mpmath.mpf(float(c)) for c in model.coef]

    def p(q):
        x = (2 * q - a_ - b_) / (b_ - a_)
        b1 = b2 = mpmath.mpf(0)
        for c in reversed(coef[1:]):
            b1, b2 = 2 * x * b1 - b2 + c, b1
        return x * b1 - b2 + coef[0]

    mus = [mu_max * (k + 1) / a.quad_points for k in range(a.quad_points)]
    with mpmath.workdps(int(a.depth) + 30):
        pts = mpmath.linspace(a_, b_, 41)
        t0 = time.perf_counter()
        z0 = mpmath.quad(lambda q: mpmath.exp(p(q)), pts, method="gauss-legendre")
        vals = [mpmath.quad(lambda q: mpmath.exp(p(q)) * mpmath.cos(m * q), pts,
                            method="gauss-legendre") / z0 for m in mus]
        per_point = (time.perf_counter() - t0) / (len(mus) + 1)
    print(f"mpmath.quad (Gauss-Legendre, 40 pieces, {int(a.depth) + 30} digits): "
          f"{per_point:.2f} s per point")
    q = np.linspace(a_, b_, 20001)
    t0 = time.perf_counter()
    w = np.exp(model.log_density(q) - model.log_density(q).max())
    naive = [np.trapezoid(w * np.cos(m * q), q) / np.trapezoid(w, q) for m in mus]
    per_naive = (time.perf_counter() - t0) / len(mus)
    print(f"numpy double-precision trapezoid, 20001 points: {per_naive * 1e3:.2f} ms per point")
    for m, v, nv in zip(mus, vals, naive):
        print(f"  mu = {m:.4f}: reference {mpmath.nstr(v, 6)}, double precision {nv:.3e}")


if __name__ == "__main__":
    main()
