"""Observables at real mu (signfree.analysis.observables) against closed forms.

Gaussian: ln rho = -q^2 / (2 s^2), measured as slopes (the average over an
interval is exactly -q_centre / s^2). Gradshteyn & Ryzhik 3.896.4 gives
Z(mu)/Z(0) = exp(-mu^2 s^2 / 2); differentiating, the weight rho e^{i mu q}
normalised is a normal distribution of mean m = i mu s^2 and variance s^2,
so <q>_mu = i mu s^2, <q^2>_mu = s^2 - mu^2 s^4, <q^3>_mu = m^3 + 3 m s^2 and
chi = (<q^2> - <q>^2) / V = s^2 / V (moments of the normal distribution,
e.g. DLMF 18.5.18 through the Hermite polynomials; common practice).

Two Gaussians at +-a: rho = exp(-(q-a)^2/2) + exp(-(q+a)^2/2), so (the same
source) Z(mu)/Z(0) = exp(-mu^2/2) cos(a mu), which vanishes at a mu = pi/2 +
k pi; <q>_mu = -i d ln Z / d mu = i (mu + a tan(a mu)) and chi V = -d^2 ln Z /
d mu^2 = 1 + a^2 / cos^2(a mu) diverge there. ln rho = -q^2/2 - a^2/2 +
ln(2 cosh(a q)) is not a polynomial: its Chebyshev series converges slowly,
the adversarial case for the smoothing.
"""
from fractions import Fraction

import mpmath
import numpy as np
import pytest

from signfree.analysis.analyse import analyse
from signfree.analysis.settings import parse_mu_spec
from signfree.density import Density

S2, V = 9.0, 20.0


def gaussian(half_range=90.0, width=0.5, error=1e-12):
    c = np.arange(-half_range + width / 2, half_range, width)
    return Density(kind="slopes", q=c, value=-c / S2, width=np.full_like(c, width),
                   error=np.full_like(c, error), error_source="stated", volume=V)


def gaussian_exact(name, mu):
    """The closed forms of the module docstring."""
    with mpmath.workdps(40):
        m = 1j * mpmath.mpf(mu) * S2
        return {"n": m / V, "chi": mpmath.mpf(S2) / V, "<q^2>": S2 + m * m,
                "<q^3-q>": m ** 3 + 3 * m * S2 - m}[name]


@pytest.fixture(scope="module")
def deep():
    # mu up to 7: D = mu^2 s^2 / (2 ln 10) reaches 96 cancelled orders; the range
    # +-30 s puts the edges at exp(-450), far below. Slopes stated to 1e-12
    # fix Z only to about 1e-12 of Z(0) (a ripple below that is invisible),
    # so the rows past mu ~ 2.4 are computed but not ok.
    return analyse(gaussian(), [Fraction(k) for k in (0, 1, 3, 5, 7)],
                   observables="n,chi,q^2,q^3-q")


@pytest.mark.parametrize("name", ["n", "chi", "<q^2>", "<q^3-q>"])
def test_gaussian_ratios_at_deep_cancellation(deep, name):
    table = deep.observables.real
    assert float(abs(deep.table.rows[-1].value)) < 1e-95
    for mu, v, z in zip(table.mus, table.values[name], deep.table.rows):
        exact = gaussian_exact(name, mu)
        # the model's ratios are computed right at every depth ...
        assert abs(v.value - exact) <= 1e-8 * max(1, abs(exact)), float(mu)
        # ... and they are ok exactly where Z is
        assert (v.status == "ok") == (z.status == "ok"), (float(mu), v.status, z.status)
        if v.status == "ok":
            assert abs(v.value - exact) <= v.total_err, (float(mu), v.value, exact)
            assert v.total_err <= 1e-7 * max(1, abs(exact))
    assert sum(v.status == "ok" for v in table.values[name]) >= 2


def test_gaussian_columns_print_only_supported_digits(deep):
    recs = deep.table.records()
    assert "n_imag" in deep.table.columns() and "<q^2>_status" in recs[0]
    for rec, r in zip(recs, deep.table.rows):
        mu = float(r.mu)
        if rec["n_status"] != "ok":
            assert rec["n_imag"] == ""
            continue
        # <q>_mu / V = i mu s^2 / V is purely imaginary (Gradshteyn & Ryzhik 3.896.4)
        assert rec["n"] == "0"
        got = mpmath.mpf(rec["n_imag"])
        digits = len(rec["n_imag"].split("e")[0].replace("-", "").replace(".", "").lstrip("0"))
        assert abs(got - mu * S2 / V) <= 10 ** (-digits + 1) * max(mu * S2 / V, 1e-30) \
            or mu == 0
        assert rec["chi"].startswith("0.45") and rec["chi_status"] == "ok"


def test_gaussian_per_mu_degree_and_jackknife_agree_with_the_closed_form():
    # 6 replicas with noise 1e-4 on the slopes: jackknife over the replicas
    # and the per-mu degree path give values within their errors
    rng = np.random.default_rng(5)
    base = gaussian(half_range=40.0, width=1.0)
    reps = base.value + 1e-4 * rng.standard_normal((6, len(base.q)))
    d = Density(kind="slopes", q=base.q, value=reps.mean(axis=0), width=base.width,
                error=reps.std(axis=0, ddof=1) / np.sqrt(6), error_source="replicas",
                replicas=reps, replica_labels=tuple(range(6)), volume=V)
    for degree in (None, "per-mu"):
        res = analyse(d, parse_mu_spec("0:2:5"), observables="n,chi", degree=degree)
        for name in ("n", "chi"):
            for mu, v in zip(res.observables.real.mus, res.observables.real.values[name]):
                exact = gaussian_exact(name, mu)
                assert v.stat_err is not None
                if v.status == "ok":
                    assert abs(v.value - exact) <= 3 * v.total_err, (degree, name, float(mu))


def test_range_that_hides_the_tails_is_not_ok():
    # +-4 s of range: the endpoint terms of numerator and denominator reach
    # the values, so a row may be ok only where it still holds the untruncated
    # Gaussian value within its errors (Gradshteyn & Ryzhik 3.896.4).
    res = analyse(gaussian(half_range=12.0), parse_mu_spec("0:3:7"), observables="n,q^2")
    statuses = set()
    for name in ("n", "<q^2>"):
        for mu, v in zip(res.observables.real.mus, res.observables.real.values[name]):
            statuses.add(v.status)
            if v.status == "ok":
                assert abs(v.value - gaussian_exact(name, mu)) <= v.total_err, (name, mu)
    assert statuses - {"ok"}


# ---------------------------------------------------------------------------
# two Gaussians: zeros of Z on the real axis

A = 1.5


def mixture(width=0.25, half_range=9.0, error=1e-3):
    """Exact interval-average slopes of ln rho = -q^2/2 + ln(2 cosh(A q))."""
    c = np.arange(-half_range + width / 2, half_range, width)

    def lnrho(q):
        return -q * q / 2 + np.logaddexp(A * q, -A * q)

    slope = (lnrho(c + width / 2) - lnrho(c - width / 2)) / width
    return Density(kind="slopes", q=c, value=slope, width=np.full_like(c, width),
                   error=np.full_like(c, error), error_source="stated", volume=1.0,
                   symmetry="even")


def mixture_exact(name, mu):
    with mpmath.workdps(40):
        mu = mpmath.mpf(mu)
        return {"n": 1j * (mu + A * mpmath.tan(A * mu)),
                "chi": 1 + A ** 2 / mpmath.cos(A * mu) ** 2}[name]


def test_two_peaks_no_confident_number_where_the_smoothing_fails():
    # ln cosh(A q) has poles of its derivative at q = +-i pi / (2 A), 1.05 from
    # the real axis: a Chebyshev series on +-9 converges like 1.12^-k
    # (Trefethen, ATAP ch. 8), so the fit needs a degree near 50 and the next
    # candidates continue differently. Near the first zero of Z
    # (mu = pi / (2 A) = 1.047), where |<q>| is about 22, no row may be ok
    # unless it holds the exact value; by symmetry <q>_0 = 0 exactly.
    res = analyse(mixture(), [Fraction(k, 10) for k in (0, 5, 10, 11, 15)],
                  observables="n,chi")
    assert res.table.info["degree"] >= 30
    for name in ("n", "chi"):
        for mu, v in zip(res.observables.real.mus, res.observables.real.values[name]):
            if v.status == "ok":
                assert abs(v.value - mixture_exact(name, mu)) <= v.total_err, (name, mu)
    n0 = res.observables.real.values["n"][0]
    assert n0.status == "ok" and abs(n0.value) <= n0.total_err < 1e-10
    assert any(v.status == "unresolved" for v in res.observables.real.values["chi"])
