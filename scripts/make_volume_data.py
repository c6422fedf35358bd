#!/usr/bin/env python
"""Write the synthetic sweep data in data/volumes/ (relative to the repository).

Independent planar rotors (see signfree.scenarios) at two couplings
b = 0.5, 1.0 and three volumes V = 32, 48, 64: Robbins-Monro (LLR) slope
estimates on unit intervals over |q| <= 0.75 V, 8 replicas, each slope the
exact fixed point of an ideal LLR iteration plus Gaussian noise of sd 0.003
(as scripts/make_demo_data.py makes the demo). The manifest lists them with
the coupling as a label. The free-energy density of independent rotors does
not depend on V,

    Delta f(mu) = -ln( I0(sqrt(b^2 - mu^2)) / I0(b) )       (DLMF 10.32.1),

(J0(sqrt(mu^2 - b^2)) in place of I0 past mu = b, DLMF 10.27.6), so the
infinite-volume limit is known exactly; exact.csv lists it.

Every random draw comes from numpy.random.default_rng with a fixed seed per
file, and every number has a fixed format: rerunning the script reproduces
the files byte for byte.

    python scripts/make_volume_data.py
"""
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import mpmath  # noqa: E402
import numpy as np  # noqa: E402

from signfree.scenarios import llr_slope  # noqa: E402

OUT = ROOT / "data" / "volumes"
COUPLINGS = (0.5, 1.0)
VOLUMES = (32, 48, 64)
REPLICAS = 8
WIDTH = 1.0
NOISE = 0.003
REACH = 0.75          # intervals cover |q| <= REACH * V
DPS = 20
EXACT_MU = [f"{k / 20:.2f}" for k in range(41)]    # 0.00 ... 2.00
MADE_BY = "scripts/make_volume_data.py"


def seed(b, volume):
    return 7000 + int(round(10 * b)) * 100 + volume


def name(b, volume):
    return f"rotors_b{b:g}_V{volume}.csv"


def write(path, lines):
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write("\n".join(lines) + "\n")
    print(f"wrote {path.relative_to(ROOT)}")


def make_slopes(b, volume):
    half = int(REACH * volume)
    centres = np.arange(-half + WIDTH / 2, half, WIDTH)
    exact = {}
    for c in centres:
        if c > 0:   # rho is even: the slope is odd in q
            exact[c] = float(llr_slope(c - WIDTH / 2, c + WIDTH / 2, b, volume, dps=DPS))
    s = seed(b, volume)
    rng = np.random.default_rng(s)
    noise = rng.normal(0.0, NOISE, size=(REPLICAS, len(centres)))
    lines = ["# kind: slopes", f"# volume: {volume}", "# symmetry: even",
             f"# scenario: {volume} independent planar rotors, coupling b = {b:g}, "
             "charge q = sum sin(theta)", f"# made by: {MADE_BY} (seed {s})",
             "replica,q,width,slope"]
    for r in range(REPLICAS):
        for j, c in enumerate(centres):
            value = exact[c] if c > 0 else -exact[-c]
            lines.append(f"{r + 1},{float(c)!r},{WIDTH!r},{value + noise[r, j]:.10g}")
    write(OUT / name(b, volume), lines)


def exact_delta_f(mu, b):
    with mpmath.workdps(40):
        mu, b = mpmath.mpf(mu), mpmath.mpf(b)
        d = b * b - mu * mu
        single = (mpmath.besseli(0, mpmath.sqrt(d)) if d >= 0
                  else mpmath.besselj(0, mpmath.sqrt(-d)))
        return -mpmath.log(abs(single / mpmath.besseli(0, b)))


README = f"""\
# Sweep data (synthetic)

These files are synthetic and exist only to demonstrate and test signfree's
sweeps and infinite-volume limits.

Independent planar rotors, charge q = sum sin(theta), at couplings b =
{", ".join(f"{b:g}" for b in COUPLINGS)} and volumes V = {", ".join(map(str, VOLUMES))}: one file
per (b, V), rotors_b<b>_V<V>.csv, holding Robbins-Monro (LLR) slope estimates
on unit intervals over |q| <= {REACH} V, {REPLICAS} replicas; each value is the exact
fixed point of an ideal LLR iteration (signfree.scenarios.llr_slope) plus
Gaussian noise of sd {NOISE}, from numpy.random.default_rng with seed
7000 + 100 * round(10 b) + V.

manifest.csv lists them with the coupling as the label b:

    signfree sweep data/volumes/manifest.csv --mu 0:1.6:17

The free-energy density of independent rotors does not depend on V:
Delta f(mu) = -ln|I0(sqrt(b^2 - mu^2)) / I0(b)| (DLMF 10.32.1; J0 past mu = b,
DLMF 10.27.6). exact.csv lists it for mu = 0, 0.05, ..., 2.

Regenerate with `python scripts/make_volume_data.py`; the output is reproduced
byte for byte.
"""


def write_readme():
    with open(OUT / "README.md", "w", encoding="utf-8", newline="\n") as fh:
        fh.write(README)
    print(f"wrote {(OUT / 'README.md').relative_to(ROOT)}")


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    manifest = ["# independent planar rotors: two couplings x three volumes", "file,volume,b"]
    for b in COUPLINGS:
        for v in VOLUMES:
            make_slopes(b, v)
            manifest.append(f"{name(b, v)},{v},{b:g}")
    write(OUT / "manifest.csv", manifest)
    exact = ["# exact Delta f(mu) = -ln|I0(sqrt(b^2 - mu^2)) / I0(b)|, the same for every V "
             "(DLMF 10.32.1, 10.27.6)", f"# made by: {MADE_BY} (no random numbers)",
             "b,mu,delta_f"]
    for b in COUPLINGS:
        for mu in EXACT_MU:
            exact.append(f"{b:g},{mu},{mpmath.nstr(exact_delta_f(mu, b), 20)}")
    write(OUT / "exact.csv", exact)
    write_readme()
    print(f"done in {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
