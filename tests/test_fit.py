"""Smoothing: the Chebyshev fits against numpy.polynomial, the degree and
parity choices, and the slope reconstruction."""
import numpy as np
import pytest
from numpy.polynomial import Chebyshev
from scipy import stats

from signfree.models.chebyshev import chi2_sf, fit_chebyshev, fit_degree
from signfree.density import Density, slope_knots
from signfree.errors import InputError
from signfree.models.piecewise import PiecewiseModel


def log_density(q, y, err=None, **kw):
    return Density(kind="log_density", q=np.asarray(q, float), value=np.asarray(y, float),
                   error=None if err is None else np.asarray(err, float),
                   error_source="stated" if err is not None else "none", **kw)


def test_log_density_fit_matches_numpy_polynomial():
    # numpy.polynomial.Chebyshev.fit (weighted least squares on the same
    # domain) is the reference; our constant c_0 is shifted, the rest must agree.
    rng = np.random.default_rng(3)
    q = np.linspace(-4, 7, 60)
    err = 0.01 + 0.02 * rng.random(60)
    y = -0.3 * q ** 2 + 0.05 * q ** 3 - 0.002 * q ** 4 + err * rng.standard_normal(60)
    model = fit_degree(log_density(q, y, err), 5)
    ref = Chebyshev.fit(q, y, 5, w=1 / err, domain=[-4, 7])
    np.testing.assert_allclose(model.coef[1:], ref.coef[1:], rtol=1e-9, atol=1e-12)
    resid = (ref(q) - y) / err
    assert model.chi2 == pytest.approx(float(resid @ resid), rel=1e-9)
    assert model.dof == 60 - 6


def test_slopes_fit_recovers_an_exact_polynomial():
    # Interval-average slopes of a degree-6 polynomial ln rho are reproduced
    # exactly by the degree-6 model (numpy.polynomial evaluates the truth).
    truth = Chebyshev([0.0, 0.4, -3.0, 0.2, -0.5, 0.05, -0.08], domain=[-10, 10])
    lo = np.arange(-10, 10, 0.5)
    width = np.full_like(lo, 0.5)
    slope = (truth(lo + width) - truth(lo)) / width
    d = Density(kind="slopes", q=lo + width / 2, value=slope, width=width,
                error=np.full_like(lo, 1e-3), error_source="stated")
    model = fit_degree(d, 6)
    np.testing.assert_allclose(model.coef[1:], truth.coef[1:], rtol=1e-9, atol=1e-11)
    q = np.linspace(-9, 9, 7)
    np.testing.assert_allclose(model.derivative(q), truth.deriv()(q), rtol=1e-8)


def test_automatic_degree_from_the_stated_errors():
    # Data from a degree-6 polynomial with known Gaussian noise: lower degrees
    # are rejected by chi^2, and the criterion stops at 6 or just above.
    rng = np.random.default_rng(11)
    truth = Chebyshev([0, 0.7, -4.0, 0.6, -0.9, 0.3, 0.4], domain=[-5, 5])
    q = np.linspace(-5, 5, 120)
    err = np.full_like(q, 0.01)
    fit = fit_chebyshev(log_density(q, truth(q) + err * rng.standard_normal(120), err),
                        parity="none")
    assert 6 <= fit.model.degree <= 8
    assert fit.consistent
    assert fit.candidates[5].chi2 / fit.candidates[5].dof > 10
    assert [m.degree for m in fit.next_models] == [fit.model.degree + 1, fit.model.degree + 2]


def test_chi2_p_value_matches_scipy():
    # scipy.stats.chi2.sf is the reference for the survival function
    for chi2, dof in [(3.0, 1), (120.0, 100), (75.3, 80), (500.0, 400)]:
        assert chi2_sf(chi2, dof) == pytest.approx(stats.chi2.sf(chi2, dof), rel=1e-10)


def test_parity_detected_for_symmetric_data_and_rejected_for_asymmetric():
    # chi^2-difference test (common practice): even data -> even model.
    rng = np.random.default_rng(5)
    q = np.linspace(-6, 6, 81)
    err = np.full_like(q, 0.02)
    even = -q ** 2 / 2 - q ** 4 / 200 + err * rng.standard_normal(81)
    assert fit_chebyshev(log_density(q, even, err)).model.parity == "even"
    odd_part = even + 0.05 * q ** 3 / 10
    fit = fit_chebyshev(log_density(q, odd_part, err))
    assert fit.model.parity == "none"
    assert fit.parity_test["p"] < 0.05


def test_errors_estimated_from_residuals_when_none_are_given():
    rng = np.random.default_rng(8)
    q = np.linspace(-3, 3, 200)
    y = -q ** 2 + 0.1 * q ** 3 + 0.05 * rng.standard_normal(200)
    fit = fit_chebyshev(log_density(q, y), parity="none")
    assert fit.noise_estimated
    assert 3 <= fit.model.degree <= 6
    assert fit.model.coef[3] == pytest.approx(0.1 * 27 / 4, rel=0.1)  # q^3 = 27 (3 T1 + T3)/4 x^3


def test_too_few_points_and_bad_degree_are_input_errors():
    q = np.linspace(-1, 1, 5)
    d = log_density(q, -q ** 2, np.full(5, 0.1), source="few.csv")
    with pytest.raises(InputError, match=r"few\.csv: 5 usable data points, but degree 9"):
        fit_chebyshev(d, degree=9, parity="none")
    with pytest.raises(InputError, match="parity"):
        fit_chebyshev(d, degree=3, parity="even")


def test_slope_reconstruction_error_falls_like_width_squared():
    # Common practice: slopes measured at interval centres, joined continuously,
    # reproduce ln rho with an O(width^2) error.
    p = lambda q: -q ** 2 / 2 - q ** 4 / 40 + np.log(np.cosh(q))
    dp = lambda q: -q - q ** 3 / 10 + np.tanh(q)
    errors = []
    for w in (0.4, 0.2, 0.1):
        lo = np.arange(-4, 4 - 1e-9, w)
        knots, values, _ = slope_knots(lo + w / 2, np.full_like(lo, w), dp(lo + w / 2))
        errors.append(np.max(np.abs(values - (p(knots) - p(knots[0])))))
    assert errors[0] / errors[1] == pytest.approx(4, rel=0.1)
    assert errors[1] / errors[2] == pytest.approx(4, rel=0.1)


def test_slope_knots_bridge_gaps_and_split_overlaps():
    q = np.array([0.5, 1.5, 3.0, 3.9])
    w = np.array([1.0, 1.0, 1.0, 1.0])    # [0,1] [1,2] [2.5,3.5] [3.4,4.4]
    s = np.array([1.0, -1.0, 2.0, 0.0])
    knots, values, slopes = slope_knots(q, w, s)
    np.testing.assert_allclose(knots, [0, 1, 2, 2.5, 3.45, 4.4])
    np.testing.assert_allclose(slopes, [1, -1, 0.5, 2, 0])
    np.testing.assert_allclose(values, [0, 1, 0, 0.25, 2.15, 2.15])


# E ln(n + 1/2) = ln lambda + O(lambda^-2) for a Poisson count n (the half
# count removes the 1/(2 lambda) bias of ln n; common practice)
def test_piecewise_model_from_histogram_uses_ln_count_over_width():
    d = Density(kind="histogram", q=np.array([0.0, 1.0, 2.0, 3.0]),
                value=np.array([10.0, 0.0, 40.0, 5.0]), width=np.full(4, 2.0),
                error_source="poisson")
    m = PiecewiseModel.from_density(d)
    np.testing.assert_allclose(m.knots, [0.0, 2.0, 3.0])  # the empty bin is left out
    np.testing.assert_allclose(m.values, np.log([10.5 / 40.5, 1.0, 5.5 / 40.5]))
