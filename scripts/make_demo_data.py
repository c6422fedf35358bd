#!/usr/bin/env python
"""Write the synthetic demo data in data/demo/ (relative to the repository).

All files describe the same exactly solvable model: V = 63 independent planar
rotors with coupling b = 1.0, charge q = sum_i sin(theta_i). The exact
phase factor is (I0(sqrt(b^2 - mu^2))/I0(b))^V, which for odd V changes sign
at mu = sqrt(b^2 + j_{0,k}^2). The exact density rho(q) comes from
signfree.scenarios (inverse Laplace integral through the saddle point).

Every random draw comes from numpy.random.default_rng with a fixed seed, and
every number is written with a fixed format, so rerunning the script
reproduces the files byte for byte.

    python scripts/make_demo_data.py
"""
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import mpmath  # noqa: E402
import numpy as np  # noqa: E402

from signfree.scenarios import (  # noqa: E402
    llr_slope,
    rotor_log_density,
    rotor_phase_factor,
    sample_rotor_charges,
)

OUT = ROOT / "data" / "demo"

B = 1.0
VOLUME = 63
SCENARIO = (f"{VOLUME} independent planar rotors, coupling b = {B}, "
            f"charge q = sum sin(theta)")
MADE_BY = "scripts/make_demo_data.py"

# Digits of the exact density: far below the imitated statistical noise.
DPS = 20

SEED_SLOPES = 6301
SEED_LOG_DENSITY = 6302
SEED_HISTOGRAM = 6303

SLOPE_REPLICAS = 8
SLOPE_WIDTH = 1.0
SLOPE_CENTRES = np.arange(-47.5, 48.0, SLOPE_WIDTH)   # -47.5 ... 47.5
SLOPE_NOISE = 0.003

LOG_DENSITY_REPLICAS = 4
LOG_DENSITY_GRID = np.arange(-48, 49)                   # -48 ... 48
LOG_DENSITY_NOISE = 0.01
LOG_DENSITY_OFFSET_SD = 10.0

HISTOGRAM_SAMPLES = 2_000_000

SEED_IMAGINARY = 6304
IMAGINARY_NU = [k / 10 for k in range(11)]              # 0.0 ... 1.0
IMAGINARY_SAMPLES = 20_000

EXACT_MU = [f"{k / 20:.2f}" for k in range(61)]         # 0.00 ... 3.00
EXACT_DIGITS = 20
FIRST_SIGN_CHANGE = mpmath.nstr(
    mpmath.sqrt(B ** 2 + mpmath.besseljzero(0, 1) ** 2), 6)


def header(kind, seed):
    lines = []
    if kind is not None:
        lines.append(f"# kind: {kind}")
    lines += [f"# volume: {VOLUME}",
              "# symmetry: even",
              "# charge: continuous",
              f"# scenario: {SCENARIO}"]
    made = MADE_BY if seed is None else f"{MADE_BY} (seed {seed})"
    lines.append(f"# made by: {made}")
    return lines


def write(name, lines):
    path = OUT / name
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write("\n".join(lines) + "\n")
    print(f"wrote {path.relative_to(ROOT)}")


def make_slopes():
    """Ideal LLR fixed points on unit intervals plus Gaussian noise of sd
    SLOPE_NOISE, independent per interval and replica: the statistical
    noise of a Robbins-Monro sampler imitated by its asymptotic normal law."""
    exact = np.array([float(llr_slope(c - SLOPE_WIDTH / 2, c + SLOPE_WIDTH / 2,
                                      B, VOLUME, dps=DPS))
                      for c in SLOPE_CENTRES])
    rng = np.random.default_rng(SEED_SLOPES)
    noise = rng.normal(0.0, SLOPE_NOISE,
                       size=(SLOPE_REPLICAS, len(SLOPE_CENTRES)))
    lines = header("slopes", SEED_SLOPES)
    lines.append("replica,q,width,slope")
    for r in range(SLOPE_REPLICAS):
        for j, c in enumerate(SLOPE_CENTRES):
            lines.append(f"{r + 1},{float(c)!r},{SLOPE_WIDTH!r},"
                         f"{exact[j] + noise[r, j]:.10g}")
    write("rotors_slopes.csv", lines)


def make_log_density():
    """Exact ln rho on an integer grid, shifted by a replica-dependent
    constant and perturbed by Gaussian noise of sd LOG_DENSITY_NOISE, as a
    flat-histogram (Wang-Landau type) estimate known only up to a constant."""
    exact = np.array([float(rotor_log_density(int(q), B, VOLUME, dps=DPS)[0])
                      for q in LOG_DENSITY_GRID])
    rng = np.random.default_rng(SEED_LOG_DENSITY)
    offsets = rng.normal(0.0, LOG_DENSITY_OFFSET_SD, size=LOG_DENSITY_REPLICAS)
    noise = rng.normal(0.0, LOG_DENSITY_NOISE,
                       size=(LOG_DENSITY_REPLICAS, len(LOG_DENSITY_GRID)))
    lines = header("log_density", SEED_LOG_DENSITY)
    lines.append("replica,q,log_density,log_density_err")
    for r in range(LOG_DENSITY_REPLICAS):
        for j, q in enumerate(LOG_DENSITY_GRID):
            value = exact[j] + offsets[r] + noise[r, j]
            lines.append(f"{r + 1},{float(q)!r},{value:.10g},"
                         f"{LOG_DENSITY_NOISE!r}")
    write("rotors_log_density.csv", lines)


def make_histogram():
    """Phase-quenched Monte Carlo histogram: exact von Mises sampling of the
    rotor angles, unit bins [k - 1/2, k + 1/2) centred on the integers k.
    The bins run over -K ... K with K the largest |k| observed: the whole
    observed range, made symmetric about q = 0 (rho is even) by empty bins
    where needed; empty bins inside the range are written as zero counts."""
    rng = np.random.default_rng(SEED_HISTOGRAM)
    q = sample_rotor_charges(HISTOGRAM_SAMPLES, B, VOLUME, rng)
    k = np.floor(q + 0.5).astype(np.int64)
    reach = int(np.abs(k).max())
    lo = -reach
    counts = np.bincount(k - lo, minlength=2 * reach + 1)
    lines = header("histogram", SEED_HISTOGRAM)
    lines.append("q,count,width")
    for i, c in enumerate(counts):
        lines.append(f"{float(lo + i)!r},{int(c)},1.0")
    write("rotors_histogram.csv", lines)


def make_imaginary():
    """A direct simulation at imaginary mu = i nu, where there is no sign
    problem: each rotor angle then has the weight exp(b cos t - nu sin t) =
    exp(kappa cos(t + phi)), kappa = sqrt(b^2 + nu^2), phi = atan2(nu, b), a
    von Mises distribution sampled exactly. Written: the sample mean of
    q / V and its standard error (independent samples)."""
    rng = np.random.default_rng(SEED_IMAGINARY)
    lines = ["# quantity: n = <q>/V at imaginary mu = i nu (direct simulation)",
             f"# volume: {VOLUME}",
             f"# scenario: {SCENARIO}",
             f"# made by: {MADE_BY} (seed {SEED_IMAGINARY})",
             "nu,value,error"]
    for nu in IMAGINARY_NU:
        kappa, phi = np.hypot(B, nu), np.arctan2(nu, B)
        theta = rng.vonmises(-phi, kappa, size=(IMAGINARY_SAMPLES, VOLUME))
        n = np.sin(theta).sum(axis=1) / VOLUME
        lines.append(f"{nu:.1f},{n.mean():.6f},{n.std(ddof=1) / np.sqrt(len(n)):.6f}")
    write("rotors_imaginary.csv", lines)


def make_exact():
    """Exact phase factor Z(mu)/Z(0) as decimal strings."""
    lines = ["# quantity: exact phase factor Z(mu)/Z(0)",
             f"# volume: {VOLUME}",
             f"# scenario: {SCENARIO}",
             f"# made by: {MADE_BY} (no random numbers)",
             "mu,value"]
    for mu in EXACT_MU:
        value = rotor_phase_factor(mu, B, VOLUME, dps=50)
        text = mpmath.nstr(value, EXACT_DIGITS, strip_zeros=False,
                           min_fixed=mpmath.inf, max_fixed=-mpmath.inf,
                           show_zero_exponent=True)
        lines.append(f"{mu},{text}")
    write("rotors_exact.csv", lines)


README = f"""\
# Demo data (synthetic)

These files are synthetic and exist only to demonstrate and test signfree.

## Scenario

{VOLUME} independent planar rotors with coupling b = {B}: each angle theta
carries the weight exp(b cos theta), and the charge is q = sum sin(theta).
The exact phase factor is

    Z(mu)/Z(0) = (I0(sqrt(b^2 - mu^2)) / I0(b))^{VOLUME}    for mu <= b,
               = (J0(sqrt(mu^2 - b^2)) / I0(b))^{VOLUME}    for mu > b,

and, the volume being odd, it changes sign at mu = sqrt(b^2 + j0k^2), the
first time at mu = {FIRST_SIGN_CHANGE}.

The exact density rho(q) is the probability density of q in the
phase-quenched ensemble (normalised to Int rho dq = 1). signfree.scenarios
computes it ({DPS} significant digits) from the inverse Laplace integral of
the moment generating function (I0(sqrt(b^2 + s^2)) / I0(b))^{VOLUME} along
the vertical line through the real saddle point.

The charge takes every real value, but the tables sit on an integer grid: the
files say so with `# charge: continuous`, so that Z stays the integral and
not the sum over the grid points.

## Files

- rotors_slopes.csv: estimates of d ln rho/dq on unit intervals centred at
  -47.5, -46.5, ..., 47.5, {SLOPE_REPLICAS} replicas. Each value is the exact
  fixed point of an ideal Robbins-Monro (LLR) iteration on its interval plus
  independent Gaussian noise of sd {SLOPE_NOISE} (seed {SEED_SLOPES}).
- rotors_log_density.csv: ln rho on the grid q = -48, -47, ..., 48,
  {LOG_DENSITY_REPLICAS} replicas, each shifted by its own random constant
  (normal, sd {LOG_DENSITY_OFFSET_SD}) and perturbed by Gaussian noise of
  sd {LOG_DENSITY_NOISE}, like a Wang-Landau estimate known only up to a
  constant (seed {SEED_LOG_DENSITY}).
- rotors_histogram.csv: phase-quenched Monte Carlo histogram of
  {HISTOGRAM_SAMPLES:,} exact samples (von Mises angles), unit bins centred
  on the integers, spanning the observed range made symmetric about q = 0
  (zero counts where nothing fell) (seed {SEED_HISTOGRAM}).
- rotors_exact.csv: the exact phase factor for mu = 0, 0.05, ..., 3.00, to
  {EXACT_DIGITS} significant digits.
- rotors_imaginary.csv: a direct simulation at imaginary mu = i nu, nu = 0,
  0.1, ..., 1.0, where the weight exp(b cos theta - nu sin theta) is positive
  (a von Mises distribution of the angle, sampled exactly):
  n = <q>/V from {IMAGINARY_SAMPLES:,} samples per nu with its standard error
  (seed {SEED_IMAGINARY}); the exact value is -nu I1(r) / (r I0(r)),
  r = sqrt(b^2 + nu^2).

All random numbers come from numpy.random.default_rng with the seeds above.
Regenerate with `python scripts/make_demo_data.py`; the output is reproduced
byte for byte.
"""


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    make_exact()
    make_slopes()
    make_log_density()
    make_histogram()
    make_imaginary()
    with open(OUT / "README.md", "w", encoding="utf-8", newline="\n") as fh:
        fh.write(README)
    print(f"wrote {(OUT / 'README.md').relative_to(ROOT)}")
    print(f"done in {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
