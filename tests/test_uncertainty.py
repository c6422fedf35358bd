"""Statistical errors (signfree.uncertainty) on synthetic replicas of an exact
model.

Model: ln rho = -q^2 / (2 s^2), measured as slopes; the average slope over an
interval is exactly -q_centre / s^2, and Z(mu)/Z(0) = exp(-mu^2 s^2 / 2)
(Gradshteyn & Ryzhik 3.896.4). On +-12 s the part of rho beyond the data is
exp(-72) ~ 1e-31 of the total, negligible at the depths used for coverage
(D = -log10 Z/Z0 = 1, 3, 5). Each replica adds independent Gaussian noise of
standard deviation sd to every slope; 8 replicas per data set.
"""
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest

import exact_cases as X
from signfree.analysis.analyse import analyse
from signfree.analysis.settings import parse_mu_spec
from signfree.density import Density
from signfree.io.reading import read_density
from signfree.analysis.results import ResultTable, Row

S = 1.0
WIDTH = 0.5
R = 8
SEEDS = range(40)
MUS = [Fraction(math.sqrt(2 * d * math.log(10)) / S).limit_denominator(1000) for d in (1, 3, 5)]
# Coverage band. Degree 2 with even parity (imposed) has one free
# coefficient (the curvature), so the three mu of one data set move together
# and the trials are the 40 seeds. Nominal coverage of value +- stat_err: 0.683 when the
# errors are known (normal distribution), P(|t_7| <= 1) = 0.649 when they come
# from the scatter of 8 replicas (Student's t with R - 1 = 7 degrees of
# freedom). The binomial spread for 40 trials is sqrt(p (1 - p) / 40) ~ 0.075,
# so [0.45, 0.88] lies more than 2.5 standard deviations from either nominal
# value on both sides (a false alarm below 1%).
BAND = (0.45, 0.88)


def centres(half_range):
    return np.arange(-half_range + WIDTH / 2, half_range, WIDTH)


def exact(mu):
    """exp(-mu^2 s^2 / 2) (Gradshteyn & Ryzhik 3.896.4)."""
    with mpmath.workdps(30):
        m = mpmath.mpf(mu.numerator) / mu.denominator
        return mpmath.exp(-m * m * S * S / 2)


def replicas(seed, sd, half_range=12 * S):
    q = centres(half_range)
    rng = np.random.default_rng(seed)
    return q, -q / S ** 2 + sd * rng.standard_normal((R, len(q)))


def read_replicas(q, reps, path):
    """The replicas as a slopes file, read back: errors from the replica
    scatter, as signfree.reading gives them for real data."""
    with open(path, "w") as f:
        f.write("# kind: slopes\nq,width,slope,replica\n")
        for i, row in enumerate(reps):
            for qk, s in zip(q, row):
                f.write(f"{float(qk)!r},{WIDTH!r},{float(s)!r},{i}\n")
    return read_density(path)


def stated(q, reps, sd, keep_replicas):
    """The replica mean with the stated error sd / sqrt(R) per point, with or
    without the replicas themselves."""
    return Density(kind="slopes", q=q, value=reps.mean(axis=0), width=np.full_like(q, WIDTH),
                   error=np.full_like(q, sd / math.sqrt(R)), error_source="stated",
                   replicas=reps if keep_replicas else None,
                   replica_labels=tuple(range(R)) if keep_replicas else ())


def coverage(densities, errors, mus=MUS):
    hits = trials = 0
    for d in densities:
        table = analyse(d, mus, degree=2, parity="even", digits=8, errors=errors).table
        for row in table.rows:
            assert row.stat_err is not None and row.stat_err > 0
            hits += abs(row.value - exact(row.mu)) <= row.stat_err
            trials += 1
    return hits / trials


def test_covariance_route_covers_at_the_one_sigma_rate():
    # Known per-point errors, no replicas: linear propagation of the fit
    # covariance (Golub & Van Loan 5.3). Measured: 0.725.
    sd = 0.02
    fraction = coverage((stated(*replicas(seed, sd), sd, keep_replicas=False) for seed in SEEDS),
                        "covariance")
    assert BAND[0] <= fraction <= BAND[1]


def test_jackknife_covers_at_the_one_sigma_rate_with_known_weights():
    # Replicas and the stated (true) per-point errors as fit weights:
    # delete-one jackknife over the replicas (Efron & Stein 1981), calibrated
    # by the Student-t factor of R - 1 = 7 degrees of freedom. Measured: 0.65.
    sd = 0.02
    fraction = coverage((stated(*replicas(seed, sd), sd, keep_replicas=True) for seed in SEEDS),
                        "jackknife")
    assert BAND[0] <= fraction <= BAND[1]


def test_jackknife_covers_at_the_one_sigma_rate_with_errors_from_the_replicas(tmp_path):
    # The data as a file of replicas, read with signfree.io.reading (errors
    # from the scatter, sd / sqrt(R) estimated per point and pooled over
    # neighbouring points as fit weights), jackknife as above. 400 data sets
    # at the one mu of D = 3, so that the binomial spread is 0.023: the edges
    # 0.61 and 0.76 are 3 standard deviations from 0.683. Measured: 0.69.
    sd = 0.02
    fraction = coverage((read_replicas(*replicas(seed, sd), tmp_path / "r.csv")
                         for seed in range(1000, 1400)), "auto", mus=MUS[1:2])
    assert 0.61 <= fraction <= 0.76


@pytest.mark.parametrize("n_rep", [4, 6, 12, 50])
@pytest.mark.parametrize("errors", ["jackknife", "covariance"])
def test_one_sigma_coverage_from_4_to_50_replicas(n_rep, errors):
    # Replicas of ln rho on a grid with errors from their own scatter: with
    # few replicas the scatter is a rough estimate of the noise, which the
    # errors must absorb (pooled variances; Student's t with the degrees of
    # freedom left, Student 1908). Over 60 data sets and two mu the
    # one-sigma interval covers 0.683 (binomial spread about 0.05 for 60
    # effective trials; band [0.52, 0.84]).
    case = X.gaussian(1.0)
    hits = trials = 0
    for seed in range(60):
        d = X.log_density_data(case, X.grid(case, 7, 41), 0.03 * math.sqrt(n_rep),
                               replicas=n_rep, seed=seed)
        table = analyse(d, [Fraction(1), Fraction(2)], degree=2, parity="even", digits=8,
                        errors=errors).table
        for row in table.rows:
            hits += abs(row.value - case.exact_at(row.mu)) <= row.stat_err
            trials += 1
    assert 0.52 <= hits / trials <= 0.84


def test_bootstrap_agrees_with_the_jackknife():
    # Efron 1979 and Efron & Stein 1981: for a smooth statistic of R replicas
    # the bootstrap variance is about (R - 1)/R times the jackknife one, ratio
    # of errors sqrt(7/8) ~ 0.94, with a Monte Carlo spread of about
    # 1/sqrt(2 B) ~ 5% for B = 200 resamples (measured 0.94..0.97 on these three
    # data sets, 0.86..1.02 over ten).
    for seed in range(3):
        q, reps = replicas(100 + seed, 0.02)
        d = stated(q, reps, 0.02, keep_replicas=True)
        jk = analyse(d, MUS, degree=2, digits=8, errors="jackknife").table
        bs = analyse(d, MUS, degree=2, digits=8, errors="bootstrap", bootstrap_samples=200,
                     seed=seed).table
        assert "bootstrap, 200 resamples of 8 replicas" in bs.info["statistical_errors"]
        for a, b in zip(jk.rows, bs.rows):
            assert 0.6 <= b.stat_err / a.stat_err <= 1.6


def test_covariance_propagation_agrees_with_the_replicas():
    # Same data, both routes: the stated errors are the true standard errors
    # and the replicas carry the same noise. The jackknife estimate of one data
    # set scatters like chi_7 / sqrt(7) (relative spread ~0.26) about the
    # propagated error, so the root-mean-square over 20 data sets is compared
    # (spread ~0.06; measured 1.09, and 1.01 over 200 data sets).
    sd = 0.02
    sums = np.zeros((2, len(MUS)))
    for seed in range(20):
        d = stated(*replicas(200 + seed, sd), sd, keep_replicas=True)
        jk = analyse(d, MUS, degree=2, digits=8, errors="jackknife").table
        cov = analyse(d, MUS, degree=2, digits=8, errors="covariance").table
        assert jk.info["statistical_errors"].startswith("delete-one jackknife")
        assert cov.info["statistical_errors"].startswith("linear propagation")
        for k, (a, b) in enumerate(zip(jk.rows, cov.rows)):
            assert a.value == b.value  # one central fit, two error routes
            sums[0, k] += float(a.stat_err / a.magnitude) ** 2
            sums[1, k] += float(b.stat_err / b.magnitude) ** 2
    ratio = np.sqrt(sums[0] / sums[1])
    assert np.all((0.6 <= ratio) & (ratio <= 1.6)), ratio


# Horizon and noise: a wider range, +-20 s (exp(-200) ~ 1e-87 beyond it),
# so that the edge stays negligible out to mu = 20 (D ~ 87).
WIDE_MUS = parse_mu_spec("0:20:21")


def wide(sd, seed=1):
    q, reps = replicas(seed, sd, half_range=20 * S)
    return stated(q, reps, sd, keep_replicas=True)


def test_horizon_moves_in_as_the_noise_grows():
    fine = parse_mu_spec("0:6:61")
    quiet = analyse(wide(0.0005), fine, degree=2, digits=8).table.info["horizon"]
    noisy = analyse(wide(0.05), fine, degree=2, digits=8).table.info["horizon"]
    assert noisy["mu"] is not None and noisy["mu"] < quiet["mu"]
    assert noisy["first_lost_mu"] is not None


def test_noise_is_named_where_it_swamps_the_value():
    # The model is exactly of degree 2 here: beyond the horizon only the noise
    # can be in the way (common practice: the truncation error of a model
    # that contains the truth is zero).
    noisy = analyse(wide(0.05), WIDE_MUS, degree=2, digits=8).table
    assert noisy.info["horizon"]["reason"] == "noise"
    very = analyse(wide(0.5), WIDE_MUS, degree=2, digits=8).table
    assert very.status_counts()["noise_limited"] > 0
    assert very.info["horizon"]["reason"] == "noise"
    # Far beyond the horizon the analytic continuation is so nonlinear in the
    # noise that the jackknife spread of the neighbouring fits' change
    # understates it, and some rows say 'unresolved' (model) instead of
    # 'noise_limited': still, no row that says 'ok' may be off by more than
    # three of its total errors (GR 3.896.4 gives the truth).
    for r in very.rows:
        if r.status == "ok":
            assert abs(r.value - exact(r.mu)) <= 3 * r.total_err, float(r.mu)


def test_bootstrap_seed_is_recorded_and_reproduces_the_errors():
    d = stated(*replicas(7, 0.02), 0.02, keep_replicas=True)
    first = analyse(d, MUS, degree=2, digits=8, errors="bootstrap", bootstrap_samples=200).table
    seed = first.info["bootstrap_seed"]
    assert isinstance(seed, int)
    again = analyse(d, MUS, degree=2, digits=8, errors="bootstrap", bootstrap_samples=200,
                    seed=seed).table
    assert again.info["bootstrap_seed"] == seed
    assert [r.stat_err for r in again.rows] == [r.stat_err for r in first.rows]
    assert [r.value for r in again.rows] == [r.value for r in first.rows]
    other = analyse(d, MUS, degree=2, digits=8, errors="bootstrap", bootstrap_samples=200,
                    seed=seed + 1).table
    assert [r.stat_err for r in other.rows] != [r.stat_err for r in first.rows]


def naive(rel, mag):
    """log10 N: the phase e^{i mu q} has variance E|X|^2 - |EX|^2 = 1 - |Z|^2
    over the phase-quenched ensemble (the definition of the variance), so
    the mean of N samples has standard error sqrt((1 - |Z|^2) / N) and a
    relative error r at |Z/Z0| needs N = (1 - |Z|^2) / (r |Z|)^2 (common
    practice), at least one sample."""
    if mag >= 1:
        return 0.0
    return max(0.0, math.log10(1 - mag * mag) - 2 * math.log10(rel) - 2 * math.log10(mag))


def test_naive_samples_from_the_rows_own_errors():
    table = analyse(stated(*replicas(3, 0.02), 0.02, keep_replicas=False),
                    [Fraction(0)] + MUS, degree=2, digits=8).table
    assert table.rows[0].status == "ok" and table.rows[1].status == "ok"
    for row, rec in zip(table.rows, table.records()):
        if row.status != "ok":
            continue
        rel = float(row.total_err / row.magnitude)
        want = naive(rel, float(row.magnitude))
        assert row.naive_log10_samples == pytest.approx(want, rel=1e-9, abs=1e-9)
        assert rec["naive_samples"] == (f"1e{int(round(want))}" if want >= 0.5 else "1")


def test_naive_samples_of_a_row_built_by_hand():
    # r = 1e-2 at |Z/Z0| = 1e-3: N = (1 - 1e-6) / (1e-2 * 1e-3)^2 = 1e10 (1 - 1e-6).
    row = Row(mu=Fraction(1), value=mpmath.mpc("1e-3"), quad_err=mpmath.mpf(0),
              edge_err=mpmath.mpf(0), model_err=mpmath.mpf(0), stat_err=mpmath.mpf("1e-5"))
    assert row.naive_log10_samples == pytest.approx(10.0 + math.log10(1 - 1e-6), abs=1e-12)
    # |Z/Z0| = 0.6 with error 0.008: N = (1 - 0.36) / 0.008^2 = 1e4 exactly
    mid = Row(mu=Fraction(1, 2), value=mpmath.mpc("0.6"), quad_err=mpmath.mpf(0),
              edge_err=mpmath.mpf(0), model_err=mpmath.mpf(0), stat_err=mpmath.mpf("0.008"))
    assert mid.naive_log10_samples == pytest.approx(4.0, abs=1e-12)
    # at mu = 0 every sample has phase 1: one sample gives Z(0)/Z(0) = 1 exactly
    zero = Row(mu=Fraction(0), value=mpmath.mpc(1), quad_err=mpmath.mpf("1e-30"),
               edge_err=mpmath.mpf("1e-23"), model_err=mpmath.mpf(0), stat_err=mpmath.mpf(0))
    assert zero.naive_log10_samples == 0.0
    table = ResultTable(rows=[row, mid, zero], model_label="chebyshev:2")
    assert [r["naive_samples"] for r in table.records()] == ["1e10", "1e4", "1"]
    # the statistical error at mu = 0 is exactly zero, whatever the data
    assert table.records()[2]["avg_phase_err"] == "0"


def test_degree_per_mu_takes_the_smallest_combined_error():
    # --degree per-mu: for every mu the degree among those tried with the
    # smallest sqrt(stat^2 + model^2) (the criterion stated in the README);
    # each row must do at least as well as the automatic degree's row.
    d = wide(0.02)
    per_mu = analyse(d, WIDE_MUS[:12], degree="per-mu", digits=8).table
    auto = analyse(d, WIDE_MUS[:12], digits=8).table
    tried = per_mu.info["degrees_tried"]
    assert per_mu.info["degree"] == "per-mu" and len(tried) >= 3
    combined = lambda r: mpmath.sqrt((r.stat_err or 0) ** 2 + (r.model_err or 0) ** 2)
    for p, a in zip(per_mu.rows, auto.rows):
        assert p.degree in tried
        if a.status != "unresolved":
            assert combined(p) <= combined(a) * 1.001 + mpmath.mpf(10) ** -30 * a.magnitude
    assert {r["degree"] for r in per_mu.records()} <= {str(t) for t in tried}
