"""Delta f(mu) of several volumes and its infinite-volume limit (a fit in
1/V per mu), checked against closed forms.

References, computed here from mpmath or numpy and nothing in signfree:
- independent planar rotors: Z_V(mu)/Z_V(0) = (I0(sqrt(b^2 - mu^2)) / I0(b))^V
  (DLMF 10.32.1; J0(sqrt(mu^2 - b^2)) past mu = b, DLMF 10.27.6), so
  Delta f = -ln|Z/Z0|/V does not depend on V;
- a charge that is the sum of V Gaussian sites (variance sigma^2 each), one
  planar rotor (coupling b) and, for the adversarial case, one Gaussian of
  variance tau^2/V: Z_V(mu)/Z_V(0) = exp(-(V sigma^2 + tau^2/V) mu^2 / 2)
  I0(sqrt(b^2 - mu^2)) / I0(b) (Gradshteyn & Ryzhik 3.896.4 and DLMF
  10.32.1), hence Delta f(mu, V) = sigma^2 mu^2/2 + c(mu)/V + tau^2 mu^2/(2 V^2)
  with c(mu) = -ln(I0(sqrt(b^2 - mu^2)) / I0(b));
- numpy.polynomial.polynomial.polyfit (weighted least squares) and
  scipy.stats.chi2 for the fit itself.
"""
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from scipy.special import i0e

from signfree.analysis.analyse import analyse
from signfree.analysis.volumes import (VolumePoint, choose_order, extrapolate,
                                       fit_inverse_volume, free_energy_points,
                                       points_from_records, read_back, value_and_error)
from signfree.density import Density
from signfree.scenarios import rotor_log_density


def rotor_factor(mu, b):
    """-ln|I0(sqrt(b^2 - mu^2)) / I0(b)| (DLMF 10.32.1, 10.27.6), mpmath."""
    with mpmath.workdps(40):
        mu, b = mpmath.mpf(mu), mpmath.mpf(b)
        d = b * b - mu * mu
        single = mpmath.besseli(0, mpmath.sqrt(d)) if d >= 0 else \
            mpmath.besselj(0, mpmath.sqrt(-d))
        return float(-mpmath.log(abs(single / mpmath.besseli(0, b))))


# ---------------------------------------------------------------------------
# independent rotors: Delta f is the same for every V

B_ROTOR = 0.5
ROTOR_VOLUMES = (48, 64, 80)
ROTOR_MUS = [Fraction(k, 10) for k in range(19)]      # 0 ... 1.8


def rotor_density(volume, points=30):
    """Exact ln rho of V rotors (signfree.scenarios, 20 digits) on |q| <= 0.8 V,
    stated error 1e-10; rho is even, so half the grid is mirrored."""
    step = 0.8 * volume / points
    q = np.array([k * step for k in range(points + 1)])
    y = np.array([float(rotor_log_density(x, B_ROTOR, volume, dps=20)[0]) for x in q])
    q = np.concatenate([-q[:0:-1], q])
    y = np.concatenate([y[:0:-1], y])
    return Density(kind="log_density", q=q, value=y, error=np.full_like(q, 1e-10),
                   error_source="stated", volume=volume)


@pytest.fixture(scope="module")
def rotor_tables():
    return {v: analyse(rotor_density(v), ROTOR_MUS, digits=12).table for v in ROTOR_VOLUMES}


@pytest.fixture(scope="module")
def rotor_limit(rotor_tables):
    return extrapolate([free_energy_points(t) for t in rotor_tables.values()])


def test_rotor_delta_f_is_the_same_at_every_volume_and_in_the_limit(rotor_limit):
    # DLMF 10.32.1: Delta f = -ln(I0(sqrt(b^2 - mu^2)) / I0(b)) for every V
    ok = [r for r in rotor_limit.rows if r.status == "ok"]
    assert len(ok) >= 10          # mu up to at least 0.9
    for r in ok:
        exact = rotor_factor(r.mu, B_ROTOR)
        assert abs(r.delta_f - exact) <= r.total_err, (r.mu, r.delta_f, exact, r.total_err)
        assert r.order == 0       # no 1/V term: the chi^2 of the constant passes
        if 0 < float(r.mu) <= 0.8:  # and the digits are many
            assert r.total_err < 1e-5 * exact
    for v, points in rotor_limit.points.items():
        for p in points:
            if p.status == "ok":
                assert abs(p.delta_f - rotor_factor(p.mu, B_ROTOR)) <= p.err, (v, p)


def test_past_the_largest_volumes_horizon_the_limit_says_so(rotor_tables, rotor_limit):
    # common practice: no limit where the largest volume has lost its signal
    largest = rotor_tables[max(ROTOR_VOLUMES)].info["horizon"]["mu"]
    assert largest is not None and largest < float(ROTOR_MUS[-1])
    past = [r for r in rotor_limit.rows if float(r.mu) > largest]
    assert past
    for r in past:
        assert r.status != "ok"
        assert r.status == "past_horizon" and f"V = {max(ROTOR_VOLUMES)}" in r.reason
    assert rotor_limit.horizon() <= largest


# ---------------------------------------------------------------------------
# a known 1/V correction (and an adversarial 1/V^2 one)

SIGMA2, B_FIXED = 1.0, 1.0


def gaussian_sites_density(volume, tau2=0.0, n_sd=12, points=81):
    """ln rho of the sum of V Gaussian sites, one rotor and a Gaussian of
    variance tau2/V: the convolution of N(0, s2) with the density of sin t
    under exp(b cos t), s2 = V sigma^2 + tau2/V,
      rho(q) = (1 / (2 pi I0(b))) Int_0^2pi exp(b cos t) N(q - sin t; s2) dt,
    summed by the trapezoidal rule, which converges geometrically for a
    periodic analytic integrand (common practice; Trefethen & Weideman, SIAM
    Review 56 (2014) 385); stated error 1e-10, far above its rounding."""
    s2 = volume * SIGMA2 + tau2 / volume
    q = np.linspace(-n_sd * math.sqrt(s2), n_sd * math.sqrt(s2), points)
    t = 2 * np.pi * np.arange(256) / 256
    e = (B_FIXED * np.cos(t)[None, :] + np.outer(q, np.sin(t)) / s2
         - np.sin(t)[None, :] ** 2 / (2 * s2))
    top = e.max(axis=1)
    log_int = np.log(np.exp(e - top[:, None]).mean(axis=1)) + top
    y = -q ** 2 / (2 * s2) + log_int - np.log(i0e(B_FIXED)) - B_FIXED
    return Density(kind="log_density", q=q, value=y, error=np.full_like(q, 1e-10),
                   error_source="stated", volume=volume)


def exact_gaussian_sites(mu, volume, tau2=0.0):
    """Delta f(mu, V) = sigma^2 mu^2/2 + c(mu)/V + tau2 mu^2/(2 V^2)
    (Gradshteyn & Ryzhik 3.896.4, DLMF 10.32.1)."""
    mu = float(mu)
    return SIGMA2 * mu ** 2 / 2 + rotor_factor(mu, B_FIXED) / volume \
        + tau2 * mu ** 2 / (2 * volume ** 2)


GAUSS_MUS = [Fraction(k, 10) for k in range(21)]      # 0 ... 2


def limit_of(volumes, tau2=0.0, order="auto"):
    curves = [free_energy_points(analyse(gaussian_sites_density(v, tau2), GAUSS_MUS,
                                         digits=12).table) for v in volumes]
    return extrapolate(curves, order)


@pytest.fixture(scope="module")
def one_over_v():
    return limit_of((8, 16, 32))


def test_a_known_one_over_v_correction_is_fitted_away(one_over_v):
    # exact Delta f(mu, V) = sigma^2 mu^2/2 + c(mu)/V (GR 3.896.4, DLMF 10.32.1)
    # ln rho stated to 1e-10 fixes Z(mu)/Z(0) only to about 1e-11 (a ripple
    # below the noise is invisible): the single-volume rows are ok while Z is
    # well above that, and every ok row holds the exact value
    for v, points in one_over_v.points.items():
        for p in points:
            depth = v * exact_gaussian_sites(p.mu, v) / math.log(10)
            if depth < 6:
                assert p.status == "ok", (v, p)
            if p.status == "ok":
                assert abs(p.delta_f - exact_gaussian_sites(p.mu, v)) <= p.err, (v, p)
    for r in one_over_v.rows:
        if float(r.mu) <= 0.8:
            assert r.status == "ok", r
        if r.status != "ok":
            continue
        f_inf = SIGMA2 * float(r.mu) ** 2 / 2
        assert abs(r.delta_f - f_inf) <= r.total_err, (r.mu, r.delta_f, f_inf, r.total_err)
        if float(r.mu) >= 0.3:
            # c(mu)/V is far above the errors: the constant alone is rejected and
            # the order chosen is 1
            assert r.order == 1
            assert r.total_err < 1e-3 * f_inf


def test_the_constant_alone_is_rejected_by_its_chi2(one_over_v):
    # scipy.stats.chi2: the order-0 fit of data with a c(mu)/V term has P ~ 0
    from scipy.stats import chi2
    k = 10                                             # mu = 1
    pts = [one_over_v.points[v][k] for v in one_over_v.volumes]
    fit0 = fit_inverse_volume([p.volume for p in pts], [p.delta_f for p in pts],
                              [p.err for p in pts], 0)
    assert chi2.sf(fit0.chi2, fit0.dof) < 1e-6


def test_an_unfitted_one_over_v_squared_term_is_never_ok_and_wrong():
    # Delta f(mu, V) with tau^2 mu^2/(2 V^2) (GR 3.896.4): three volumes cannot test
    # order 2, so order 1 must fail its chi^2 where the 1/V^2 term shows; with four
    # volumes, order 2 is chosen. Every ok row must hold the exact limit.
    tau2 = 40.0
    three = limit_of((4, 8, 16), tau2)
    four = limit_of((4, 8, 16, 32), tau2)
    for limit in (three, four):
        for r in limit.rows:
            if r.status == "ok":
                f_inf = SIGMA2 * float(r.mu) ** 2 / 2
                assert abs(r.delta_f - f_inf) <= r.total_err, (r.mu, r.delta_f, r.total_err)
    assert sum(r.status == "poor_fit" for r in three.rows) >= 10
    assert sum(r.status == "ok" and r.order == 2 for r in four.rows) >= 10


# ---------------------------------------------------------------------------
# the fit itself

def test_fit_agrees_with_numpy_weighted_polyfit():
    # numpy.polynomial.polynomial.polyfit with w = 1/sigma minimises the same chi^2;
    # scipy.stats.chi2.sf gives the same P value
    from numpy.polynomial import polynomial as P
    from scipy.stats import chi2
    rng = np.random.default_rng(5)
    v = np.array([6.0, 8, 12, 16, 24, 32])
    s = rng.uniform(0.5e-3, 2e-3, v.size)
    y = 1.3 + 0.7 / v - 2.0 / v ** 2 + s * rng.standard_normal(v.size)
    for order in range(4):
        ours = fit_inverse_volume(v, y, s, order)
        coef = P.polyfit(1 / v, y, order, w=1 / s)
        assert ours.intercept == pytest.approx(coef[0], rel=1e-9, abs=1e-12)
        ref_chi2 = float(np.sum(((y - P.polyval(1 / v, coef)) / s) ** 2))
        assert ours.chi2 == pytest.approx(ref_chi2, rel=1e-7, abs=1e-12)
        assert ours.dof == v.size - order - 1
        assert ours.p_value == pytest.approx(chi2.sf(ref_chi2, ours.dof), rel=1e-7)
        assert ours.weights @ y == pytest.approx(ours.intercept, rel=1e-12)


def test_fit_err_is_the_largest_change_errors_within_their_bounds_can_make():
    # the intercept is linear in the data: its largest change over the box
    # |delta_j| <= e_j is reached at a corner (common practice, linear programming)
    import itertools
    v = [8.0, 16, 24, 32]
    y = [0.51, 0.503, 0.502, 0.5015]
    e = [1e-3, 4e-4, 3e-4, 2e-4]
    for order in (0, 1, 2):
        fit = fit_inverse_volume(v, y, e, order)
        worst = max(abs(fit_inverse_volume(v, np.add(y, np.multiply(sg, e)), e, order)
                        .intercept - fit.intercept)
                    for sg in itertools.product((-1, 1), repeat=4))
        assert fit.error() / max(1.0, math.sqrt(fit.chi2 / fit.dof)) == \
            pytest.approx(worst, rel=1e-9)


def test_errors_below_double_precision_are_raised_to_it():
    # weights 1/err^2 would overflow a double here, and a double cannot resolve
    # 1e-200 of 0.25 (numpy.finfo: eps = 2.2e-16)
    v = [10.0, 20.0, 40.0]
    y = [0.25, 0.25 + 2 ** -54, 0.25]
    fit, higher, _ = choose_order(v, y, [1e-200, 2e-200, 1e-200])
    assert fit.order == 0 and fit.intercept == pytest.approx(0.25, rel=1e-15)
    assert fit.chi2 < 1 and higher.order == 1
    assert 1e-16 < fit.error() < 1e-14


# ---------------------------------------------------------------------------
# statuses

def curve(volume, values, err=1e-6, status="ok", past=()):
    return [VolumePoint(str(k), float(volume), val, err,
                        status if isinstance(status, str) else status[k], k in past)
            for k, val in enumerate(values)]


def test_statuses_name_what_is_wrong():
    a = curve(10, [0.1, 0.2, 0.3, 0.4])
    b = curve(20, [0.1, 0.2, 0.3, 0.4], status=["ok", "edge_limited", "ok", "ok"])
    c = curve(40, [0.1, 0.2, 0.3, 0.9], past=(2,))
    rows = extrapolate([a, b, c]).rows
    # mu 0: everything consistent and ok
    assert rows[0].status == "ok" and rows[0].delta_f == pytest.approx(0.1)
    assert rows[1].status == "volume_not_ok" and "V = 20 edge_limited" in rows[1].reason
    assert rows[2].status == "past_horizon" and "V = 40" in rows[2].reason
    # 0.4, 0.4, 0.9 at errors 1e-6 fit no order up to 1 in 1/V
    assert rows[3].status == "poor_fit" and rows[3].p_value < 0.05
    alone = extrapolate([a]).rows
    assert all(r.status == "too_few_volumes" and r.delta_f is None for r in alone)
    lost = extrapolate([a, c], missing=[(20.0, "cannot read")]).rows
    assert all(r.status in ("volume_missing", "too_few_volumes") for r in lost)
    assert lost[0].status == "volume_missing" and "V = 20" in lost[0].reason
    with pytest.raises(ValueError, match="one mu grid"):
        extrapolate([a, curve(20, [0.1, 0.2])])
    with pytest.raises(ValueError, match="twice"):
        extrapolate([a, curve(10, [0.1, 0.2, 0.3, 0.4])])


def test_a_row_without_a_supported_digit_leaves_the_limit_empty():
    a = curve(10, [0.1, None], status=["ok", "noise_limited"])
    b = curve(20, [0.1, 0.2])
    rows = extrapolate([a, b]).rows
    assert rows[1].delta_f is None and rows[1].status == "volume_not_ok"
    assert "no supported digit" in rows[1].reason


# ---------------------------------------------------------------------------
# text forms

def test_written_values_and_errors_still_enclose_the_exact_interval():
    # what is read back must cover what was written: [x - e, x + e] inside the
    # read-back interval (common practice: two digits of the error)
    rng = np.random.default_rng(11)
    for _ in range(2000):
        x = float(rng.normal() * 10.0 ** rng.integers(-8, 3))
        e = float(abs(x) * 10.0 ** rng.uniform(-15, 1) + 1e-300)
        vt, et = value_and_error(x, e)
        x2, e2 = read_back(vt, et)
        assert x2 - e2 <= x - e and x + e <= x2 + e2, (x, e, vt, et)
        assert e2 <= 1.2 * e + 1e-15 * abs(x) + 1e-299     # and not much wider
    recs = [{"mu": "0.5", "volume": "16", "delta_f": "0.12345", "delta_f_err": "2.1e-5",
             "status": "ok", "past_horizon": "no"}]
    p = points_from_records(recs)[0]
    assert p.volume == 16.0 and p.delta_f == 0.12345
    assert p.err == pytest.approx(2.1e-5 + 5e-6, rel=1e-12) and not p.past_horizon
