"""Statistical errors of ratio observables on synthetic replicas of an exact
model (the data sets of tests/test_uncertainty.py: ln rho = -q^2 / (2 s^2)
as slopes on +-12 s, 8 replicas with independent Gaussian noise per slope).

Exact values (Gradshteyn & Ryzhik 3.896.4, as in tests/test_observables.py),
without a volume (V = 1): n = <q>_mu = i mu s^2, <q^2>_mu = s^2 - mu^2 s^4.
The errors come from the ratio itself (jackknife over the replicas, each
resample refitted and integrated) or from the propagated fit covariance;
their coverage of value +- stat_err is judged with the band of
tests/test_uncertainty.py (BAND, 40 data sets, nominal 0.683 for known
errors, 0.649 for the Student-t case).
"""
import mpmath
import pytest

from signfree.analysis.analyse import analyse

from test_uncertainty import BAND, MUS, S, SEEDS, replicas, stated

SD = 0.02


def exact(name, mu):
    m = 1j * mpmath.mpf(mu.numerator) / mu.denominator * S * S
    return {"n": m, "<q^2>": S * S + m * m}[name]


def coverage(densities, errors, name):
    hits = trials = 0
    for d in densities:
        res = analyse(d, MUS, degree=2, parity="even", digits=8, errors=errors,
                      observables=name if name != "<q^2>" else "q^2")
        for mu, v in zip(res.observables.real.mus, res.observables.real.values[name]):
            assert v.stat_err is not None and v.stat_err > 0
            hits += abs(v.value - exact(name, mu)) <= v.stat_err
            trials += 1
    return hits / trials


@pytest.mark.parametrize("name", ["n", "<q^2>"])
def test_covariance_route_covers_at_the_one_sigma_rate(name):
    # linear propagation d<O>/dc_j = <O T_j> - <O><T_j> of the fit covariance
    # (Golub & Van Loan 5.3). Measured: 0.725 for both.
    fraction = coverage((stated(*replicas(seed, SD), SD, keep_replicas=False)
                         for seed in SEEDS), "covariance", name)
    assert BAND[0] <= fraction <= BAND[1]


@pytest.mark.parametrize("name", ["n", "<q^2>"])
def test_jackknife_of_the_ratio_covers_at_the_one_sigma_rate(name):
    # delete-one jackknife over the replicas of the ratio itself (Efron &
    # Stein 1981), numerator and denominator refitted together. Measured: 0.625
    # for both.
    fraction = coverage((stated(*replicas(seed, SD), SD, keep_replicas=True)
                         for seed in SEEDS), "jackknife", name)
    assert BAND[0] <= fraction <= BAND[1]


def test_jackknife_and_covariance_agree():
    # The same data by both routes: the stated errors are the true standard
    # errors and the replicas carry the same noise, so over 10 data sets the
    # root-mean-square ratio of the two errors is near 1 (a jackknife estimate
    # from 8 replicas scatters by about 1/sqrt(2 * 7) = 27%; common practice).
    ratios = []
    for seed in range(10):
        q, reps = replicas(200 + seed, SD)
        jk = analyse(stated(q, reps, SD, keep_replicas=True), MUS, degree=2, parity="even",
                     digits=8, errors="jackknife", observables="n,chi")
        cv = analyse(stated(q, reps, SD, keep_replicas=False), MUS, degree=2, parity="even",
                     digits=8, errors="covariance", observables="n,chi")
        for name in ("n", "chi"):
            for a, b in zip(jk.observables.real.values[name], cv.observables.real.values[name]):
                ratios.append(float(a.stat_err / b.stat_err) ** 2)
    rms = (sum(ratios) / len(ratios)) ** 0.5
    assert 0.7 <= rms <= 1.4


def test_bootstrap_of_the_ratio_agrees_with_the_jackknife():
    # Efron 1979, Efron & Stein 1981: for a smooth statistic of R replicas the
    # bootstrap variance is about (R - 1)/R times the jackknife one (error
    # ratio ~0.94), with a Monte Carlo spread of about 1/sqrt(2 B) = 13% for
    # B = 30 resamples; the same seed gives the same errors.
    for seed in range(2):
        q, reps = replicas(300 + seed, SD)
        d = stated(q, reps, SD, keep_replicas=True)
        jk = analyse(d, MUS, degree=2, parity="even", digits=8, errors="jackknife",
                     observables="n")
        bs = [analyse(d, MUS, degree=2, parity="even", digits=8, errors="bootstrap",
                      bootstrap_samples=30, seed=seed, observables="n") for _ in range(2)]
        for a, b, c in zip(jk.observables.real.values["n"], bs[0].observables.real.values["n"],
                           bs[1].observables.real.values["n"]):
            assert 0.5 <= float(b.stat_err / a.stat_err) <= 1.5
            assert b.stat_err == c.stat_err
