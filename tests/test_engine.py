"""The Fourier engine against sources outside the project: closed-form
integrals (Gradshteyn & Ryzhik) and mpmath.quad as an independent
high-precision integrator."""
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from numpy.polynomial import chebyshev as C

from signfree import engine
from signfree.models.chebyshev import ChebyshevModel
from signfree.models.piecewise import PiecewiseModel


def gaussian_model(sigma, half_range):
    """ln rho = -q^2 / (2 sigma^2) on [-L, L] as an exact Chebyshev series:
    x^2 = (T_0 + T_2) / 2 with q = L x."""
    c = -(half_range ** 2) / (4 * sigma ** 2)
    return ChebyshevModel(coef=np.array([c, 0.0, c]), domain=(-half_range, half_range),
                          parity="even")


def value(tr, k, row=0):
    z = tr.values[row][k]
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


@pytest.mark.parametrize("path", ["real", "auto"])
@pytest.mark.parametrize("depth", [50, 200])
def test_gaussian_fourier_integral_at_deep_cancellation(depth, path):
    # Gradshteyn & Ryzhik 3.896.4: Int exp(-a x^2) cos(b x) dx = sqrt(pi/a) exp(-b^2/(4a)),
    # so Z(mu)/Z(0) = exp(-mu^2 sigma^2 / 2). The range +-40 sigma puts the edge
    # terms below 1e-340, far under the 12 digits asked for at D = 200.
    sigma = 1.0
    mu = Fraction(math.sqrt(2 * depth * math.log(10)))
    tr = engine.transform([gaussian_model(sigma, 40.0)], [Fraction(1, 2), mu],
                          digits=12, path=path)
    with mpmath.workdps(depth + 40):
        exact = [mpmath.exp(-(mpmath.mpf(m.numerator) / m.denominator) ** 2 * sigma ** 2 / 2)
                 for m in (Fraction(1, 2), mu)]
        for k in range(2):
            got = value(tr, k)
            assert abs(got - exact[k]) <= 1e-12 * exact[k]
            assert abs(got - exact[k]) <= tr.quad_err[0][k] + 1e-14 * exact[k]
            assert abs(got.imag) <= tr.quad_err[0][k]
        assert -mpmath.log10(value(tr, 1).real) == pytest.approx(depth, abs=1e-9)
    assert all(tr.resolved)
    if path == "real":
        # on the real axis the sum cancels over D orders: the precision must cover them
        assert tr.prec >= (depth + 12) * math.log2(10)
    else:
        # through the saddle i mu sigma^2 the sum does not cancel (common practice:
        # the method of steepest descent), so D no longer enters the precision
        assert tr.heights[1] == pytest.approx(float(mu) * sigma ** 2, rel=0.05)
        assert tr.path_orders[1] < 3 and tr.prec < depth * math.log2(10)


def test_double_precision_fails_where_the_engine_does_not():
    # Common practice (and the measured fact that decides the design): a
    # double-precision trapezoid sum of the same Gaussian at D = 50 is noise.
    sigma, L = 1.0, 40.0
    mu = math.sqrt(2 * 50 * math.log(10))
    q = np.linspace(-L, L, 20001)
    naive = np.trapezoid(np.exp(-q ** 2 / 2) * np.cos(mu * q), q) / np.sqrt(2 * np.pi)
    assert abs(naive / 1e-50 - 1) > 1e3  # wrong by far more than the value
    tr = engine.transform([gaussian_model(sigma, L)], [mu], digits=12)
    assert abs(value(tr, 0).real / mpmath.mpf("1e-50") - 1) < 1e-9


def _quad_reference(model, mu, dps):
    """mpmath.quad of the same model, split into pieces for the oscillation."""
    a, b = model.domain
    coef = [mpmath.mpf(float(c)) for c in model.coef]
    with mpmath.workdps(dps):
        def lnrho(q):
            x = (2 * q - mpmath.mpf(a) - b) / (mpmath.mpf(b) - a)
            b1 = b2 = mpmath.mpf(0)
            for c in reversed(coef[1:]):
                b1, b2 = 2 * x * b1 - b2 + c, b1
            return x * b1 - b2 + coef[0]
        pts = mpmath.linspace(a, b, 41)
        m = mpmath.mpf(mu.numerator) / mu.denominator
        num = mpmath.quad(lambda q: mpmath.exp(lnrho(q) + 1j * m * q), pts)
        den = mpmath.quad(lambda q: mpmath.exp(lnrho(q)), pts)
        return num / den


def test_non_polynomial_density_against_mpmath_quad():
    # mpmath.quad (tanh-sinh, at 30 digits) as an independent reference on the
    # same model: a degree-24 Chebyshev interpolant of a non-polynomial,
    # asymmetric ln rho = -q^2/2 - q^4/400 + 0.3 q + ln(1 + 0.5 cos q) on [-12, 12].
    f = lambda q: -q ** 2 / 2 - q ** 4 / 400 + 0.3 * q + np.log(1 + 0.5 * np.cos(q))
    a, b = -12.0, 12.0
    x = np.cos(np.pi * (np.arange(25) + 0.5) / 25)
    coef = C.chebfit(x, f(0.5 * (b - a) * x), 24)
    model = ChebyshevModel(coef=coef, domain=(a, b))
    mus = [Fraction(1, 3), Fraction(3), Fraction(6)]
    tr = engine.transform([model], mus, digits=14)
    for k, mu in enumerate(mus):
        ref = _quad_reference(model, mu, 30)
        got = value(tr, k)
        assert abs(got - ref) <= 1e-13 * abs(ref)
        assert abs(got.imag) > 1e-3 * abs(got)  # asymmetric: a real imaginary part
    assert abs(value(tr, 2)) < 1e-4  # several orders cancel at mu = 6


def test_certified_route_encloses_the_reference():
    # python-flint's acb.integral gives rigorous enclosures (Johansson, Arb):
    # the Gaussian answer of Gradshteyn & Ryzhik 3.896.4 must lie in the ball.
    model = gaussian_model(1.0, 30.0)
    mu = Fraction(8)
    tr = engine.transform([model], [mu], digits=12, certify=True)
    assert tr.method == "acb.integral"
    z = tr.values[0][0]
    with mpmath.workdps(60):
        exact = mpmath.exp(-mpmath.mpf(32))
        mid = engine.to_mpf(z.real)
        assert abs(mid - exact) <= engine.upper(z.real - z.real.mid()) + 1e-30 * exact
        assert abs(mid / exact - 1) < 1e-12


def test_uniform_grid_matches_the_direct_route():
    # The factorised exp(i mu q) on an even grid must agree with direct
    # evaluation point by point (two ways of computing the same sum).
    model = gaussian_model(2.0, 20.0)
    grid = [Fraction(k, 10) for k in range(20)]
    fast = engine.transform([model], grid, digits=12)
    slow = engine.transform([model], grid[::3] + [grid[-1]], digits=12)
    for k, mu in enumerate(grid[::3] + [grid[-1]]):
        j = grid.index(mu)
        assert abs(value(fast, j) - value(slow, k)) <= 1e-12 * abs(value(slow, k))


def test_piecewise_exact_segments_against_mpmath_quad():
    # exact segment sums vs mpmath.quad over each linear piece (breakpoints given)
    knots = np.array([-3.0, -1.5, -0.25, 0.5, 2.0, 3.5])
    vals = np.array([-4.5, -1.2, -0.1, 0.0, -2.1, -6.0])
    model = PiecewiseModel(knots=knots, values=vals)
    mus = [Fraction(0), Fraction(7, 4), Fraction(5)]
    tr = engine.transform([model], mus, digits=15)
    with mpmath.workdps(40):
        def rho(q):
            i = max(0, min(len(knots) - 2, int(np.searchsorted(knots, float(q)) - 1)))
            t0, t1 = mpmath.mpf(knots[i]), mpmath.mpf(knots[i + 1])
            v0, v1 = mpmath.mpf(vals[i]), mpmath.mpf(vals[i + 1])
            return mpmath.exp(v0 + (v1 - v0) * (q - t0) / (t1 - t0))
        pts = [mpmath.mpf(k) for k in knots]
        den = mpmath.quad(rho, pts)
        for k, mu in enumerate(mus):
            m = mpmath.mpf(mu.numerator) / mu.denominator
            ref = mpmath.quad(lambda q: rho(q) * mpmath.expj(m * q), pts) / den
            assert abs(value(tr, k) - ref) <= 1e-14 * max(abs(ref), 1e-3)
