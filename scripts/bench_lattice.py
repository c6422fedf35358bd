"""Benchmark: sums over a charge lattice.

1. The engine alone: the Skellam distribution P(Q) = exp(-lam) I_Q(lam)
   (lam = 300, |Q| <= 700, ln P exact to 400 digits) at 400 theta on
   [0, pi], Z(pi) = exp(-600) about 1e-261: time, precision reached, and the
   largest relative error against exp(lam (cos theta - 1)) (DLMF 10.35.1).
2. ``signfree run`` on the same distribution (lam = 150) stored as doubles
   (a log_density file, 601 points), 400 theta on [0, 2 pi], process start
   included; beside it the integral route on the same file (--step
   continuous), which sets its precision as for a continuous Gaussian.
3. ``signfree run`` on 2e5 Monte Carlo samples of a Skellam charge (lam =
   1.5), 101 theta on [0, 2 pi]: the mixed route with blocking errors.
4. ``signfree zeros`` of a periodic Ising chain of 64 spins (exact P(M)):
   64 roots in the fugacity plane and the argument-principle count.

    python scripts/bench_lattice.py
"""
import os
import subprocess
import sys
import tempfile
import time
from fractions import Fraction
from pathlib import Path

import mpmath
import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def skellam_logs(lam, L, dps):
    with mpmath.workdps(dps):
        return [mpmath.log(mpmath.besseli(q, lam)) - lam for q in range(-L, L + 1)]


def run(args, cwd):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-m", "signfree", *args], cwd=cwd, env=env,
                         capture_output=True, text=True)
    dt = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(res.stderr)
    return dt, res.stdout


def engine_bench():
    from signfree import engine
    from signfree.engine.complex_mu import _frac
    from signfree.models.lattice import Lattice, LatticeModel
    lam, L = 300, 700
    t0 = time.perf_counter()
    logs = tuple(_frac(v) for v in skellam_logs(lam, L, 400))
    t_bessel = time.perf_counter() - t0
    model = LatticeModel(lattice=Lattice(Fraction(1), Fraction(-L), 2 * L + 1), log_values=logs)
    mus = [Fraction(314159265358979, 10 ** 14) * k / 399 for k in range(400)]
    t0 = time.perf_counter()
    tr = engine.transform([model], mus, digits=15)
    dt = time.perf_counter() - t0
    worst = 0
    with mpmath.workdps(300):
        for k, mu in enumerate(tr.mus):
            exact = mpmath.exp(lam * (mpmath.cos(mpmath.mpf(mu.numerator) / mu.denominator) - 1))
            got = engine.to_mpf(tr.values[0][k].real)
            worst = max(worst, abs(got - exact) / exact)
    print(f"1. engine, Skellam lam = {lam}, {2 * L + 1} points, 400 theta up to 261 orders: "
          f"{dt:.2f} s ({t_bessel:.1f} s for the weights), up to {tr.prec} bits, "
          f"largest relative error {mpmath.nstr(worst, 2)}, all resolved: {all(tr.resolved)}")


def cli_bench(tmp):
    lam, L = 150, 300
    src = Path(tmp) / "sk.csv"
    with open(src, "w") as f:
        f.write("# kind: log_density\n# charge: integer\nq,log_density\n")
        for q, v in zip(range(-L, L + 1), skellam_logs(lam, L, 40)):
            f.write(f"{q},{float(v)!r}\n")
    dt, _ = run(["run", str(src), "--mu", "0:6.28318530717959:400", "--out", "o1", "--quiet"],
                tmp)
    print(f"2. signfree run, Skellam lam = {lam} as doubles, {2 * L + 1} points, 400 theta: "
          f"{dt:.2f} s wall")
    dt, _ = run(["run", str(src), "--mu", "0:6.28318530717959:400", "--step", "continuous",
                 "--out", "o2", "--quiet"], tmp)
    print(f"   the integral route on the same file (--step continuous): {dt:.2f} s wall")
    rng = np.random.default_rng(1)
    q = rng.poisson(0.75, 200000) - rng.poisson(0.75, 200000)
    src = Path(tmp) / "mc.csv"
    src.write_text("# kind: samples\nq\n" + "\n".join(str(int(v)) for v in q) + "\n")
    dt, out = run(["run", str(src), "--mu", "0:6.28318530717959:101", "--out", "o3", "--quiet"],
                  tmp)
    print(f"3. signfree run, 2e5 samples (lam = 1.5), 101 theta: {dt:.2f} s wall")


def zeros_bench(tmp):
    n, k = 64, 0.5
    with mpmath.workdps(60):
        # P(M) of a periodic chain from Tr T(x)^N (Baxter, Exactly Solved Models, ch. 2)
        ek, emk = mpmath.exp(k), mpmath.exp(-k)
        poly = {(0, 0): {0: mpmath.mpf(1)}, (1, 1): {0: mpmath.mpf(1)}}
        T = {(0, 0): {1: ek}, (0, 1): {0: emk}, (1, 0): {0: emk}, (1, 1): {-1: ek}}
        for _ in range(n):
            new = {}
            for (i, m), a in poly.items():
                for (mm, j), b in T.items():
                    if mm != m:
                        continue
                    d = new.setdefault((i, j), {})
                    for p, x in a.items():
                        for r, y in b.items():
                            d[p + r] = d.get(p + r, 0) + x * y
            poly = new
        pm = {}
        for i in range(2):
            for p, x in poly.get((i, i), {}).items():
                pm[p] = pm.get(p, 0) + x
        src = Path(tmp) / "chain.csv"
        with open(src, "w") as f:
            f.write("# kind: log_density\n# step: 2\n# range: complete\nq,log_density\n")
            for m in sorted(pm):
                f.write(f"{m},{float(mpmath.log(pm[m]))!r}\n")
    dt, out = run(["zeros", str(src), "--box=0:3.2,-0.5:0.5", "--out", "z"], tmp)
    print(f"4. signfree zeros, Ising chain of {n} spins: {dt:.2f} s wall; "
          + [line for line in out.splitlines() if "argument principle" in line][0])


def main():
    engine_bench()
    with tempfile.TemporaryDirectory() as tmp:
        cli_bench(tmp)
        zeros_bench(tmp)


if __name__ == "__main__":
    main()
