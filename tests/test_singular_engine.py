"""The engine routes for the rational and two-component models against
references outside the project: python-flint's acb.integral (Arb's
rigorous integration, with the logarithms' branch cuts declared through its
``analytic`` flag) on integrands written here independently of the package,
and the Gaussian closed form (Gradshteyn & Ryzhik 3.896.4)."""
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from flint import acb, arb, ctx

from signfree import engine
from signfree.engine.general import panels
from signfree.models.chebyshev import ChebyshevModel
from signfree.models.rational import RationalModel
from signfree.models.twophase import TwoComponentModel


def value(tr, k, row=0):
    z = tr.values[row][k]
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def flint_ratio(log_rho, domain, mu, prec=256):
    """Int exp(log_rho(q) + i mu q) dq / Int exp(log_rho(q)) dq over the
    domain by acb.integral; log_rho(q, analytic) works on acb balls."""
    a, b = domain
    with ctx.workprec(prec):
        def integral(m):
            f = lambda q, an: (log_rho(q, an) + acb(0, 1) * m * q).exp()
            return acb.integral(f, arb(a), arb(b), rel_tol=arb(2) ** (-prec + 30))
        r = integral(arb(mpmath.nstr(mu, 40))) / integral(arb(0))
        with mpmath.workdps(40):
            return mpmath.mpc(mpmath.mpf(r.real.mid().str(35, radius=False)),
                              mpmath.mpf(r.imag.mid().str(35, radius=False)))


def test_rational_model_with_zeros_of_rho_close_to_the_axis():
    # ln rho = -q^2/2 + sum_k ln(q^2 + y_k^2), y_k = pi (2k - 1) / (2 c): the
    # first zeros of cosh(c q) (A&S 4.5.16), 0.24 from the axis for c = 6.5,
    # so exp(ln rho) is a Gaussian times a polynomial with those zeros. The
    # model is exact in our form (residue 1 per pole); the reference is
    # acb.integral of the same function written with flint's own log.
    c, L = 6.5, 16.0
    ys = [math.pi * (2 * k - 1) / (2 * c) for k in range(1, 5)]
    model = RationalModel(coef=np.array([-L * L / 4, 0.0, -L * L / 4]),
                          poles=tuple(1j * y for y in ys), residues=(1 + 0j,) * 4,
                          domain=(-L, L))
    q = np.linspace(-3, 3, 13)
    np.testing.assert_allclose(model.log_density(q),
                               -q * q / 2 + sum(np.log(q * q + y * y) for y in ys),
                               rtol=0, atol=1e-12)

    def log_rho(x, analytic):
        out = -x * x / 2
        for y in ys:
            out += (x * x + arb(y) * arb(y)).log()
        return out

    mus = [Fraction(k, 4) for k in range(0, 17)]
    tr = engine.transform([model], mus, digits=15)
    assert tr.method.startswith("gauss-legendre on") and all(tr.resolved)
    for k in (0, 3, 7, 12, 16):
        with mpmath.workdps(40):
            ref = flint_ratio(log_rho, model.domain, mpmath.mpf(mus[k].numerator) / mus[k].denominator)
            got = value(tr, k)
            assert abs(got - ref) <= tr.quad_err[0][k] + 1e-30, (mus[k], got, ref)
            assert abs(got - ref) <= 1e-15 * abs(ref) + 1e-30


def test_rational_model_with_branch_points_and_certified_enclosures():
    # Non-integer, complex residues: rho has branch points at z = 0.3 + 0.35 i
    # and its conjugate, close to the axis; ln rho = -q^2/2 + 0.1 q
    # + 2 Re(a log(q - z)) - pi Im a with a = -0.7 + 0.4 i. Reference:
    # acb.integral with principal logarithms of i (q - z) and -i (q - conj z),
    # whose cuts point away from the axis (flint checks them through
    # ``analytic``); the certified route must agree within its radius.
    L, z, a = 10.0, complex(0.3, 0.35), complex(-0.7, 0.4)
    # -q^2/2 + 0.1 q with q = L x: (T_0 + T_2) L^2 / 4 and 0.1 L T_1
    model = RationalModel(coef=np.array([-L * L / 4, 0.1 * L, -L * L / 4]), poles=(z,),
                          residues=(a,), domain=(-L, L))

    def log_rho(x, analytic):
        zc = acb(arb(z.real), arb(z.imag))
        ac = acb(arb(a.real), arb(a.imag))
        half_pi = arb.pi() / 2
        up = (acb(0, 1) * (x - zc)).log(analytic=analytic) - acb(0, half_pi)
        down = (acb(0, -1) * (x - zc.conjugate())).log(analytic=analytic) + acb(0, half_pi)
        return -x * x / 2 + arb("0.1") * x + ac * up + ac.conjugate() * down

    mus = [Fraction(1, 2), Fraction(2), Fraction(5)]
    tr = engine.transform([model], mus, digits=14)
    cert = engine.transform([model], mus, digits=14, certify=True)
    assert cert.method == "acb.integral"
    for k, mu in enumerate(mus):
        with mpmath.workdps(40):
            ref = flint_ratio(log_rho, model.domain, mpmath.mpf(mu.numerator) / mu.denominator)
            for t in (tr, cert):
                assert abs(value(t, k) - ref) <= t.quad_err[0][k] + 1e-25 * abs(ref)
            assert abs(value(tr, k) - ref) <= 1e-14 * abs(ref)


def test_panels_keep_every_ellipse_clear_of_the_singularities():
    # Trefethen ATAP ch. 19: a panel's Gauss-Legendre error decays like
    # rho^-2n only for ellipses free of singularities; the panels near a
    # point 0.01 above the axis shrink until the point lies outside the
    # ellipse of parameter 2 (|s + sqrt(s^2 - 1)| >= 2, s the point in the
    # panel's window coordinate).
    parts = panels((-10.0, 10.0), [0.01j, -0.01j, 3 + 1j])
    assert parts[0][0] == -10.0 and parts[-1][1] == 10.0
    assert all(abs(parts[i][1] - parts[i + 1][0]) == 0 for i in range(len(parts) - 1))
    for u, v, rho in parts:
        m, h = (u + v) / 2, (v - u) / 2
        for z in (0.01j, 3 + 1j):
            s = (z - m) / h
            w = s + np.sqrt(s - 1) * np.sqrt(s + 1)
            assert max(abs(w), 1 / abs(w)) >= 2 - 1e-12
    assert min(v - u for u, v, _ in parts) < 0.05 and len(parts) < 40


def gaussian_component(weight, centre, variance, L):
    """ln(weight) - (q - centre)^2 / (2 variance) on [-L, L] as a Chebyshev
    series (q = L x, x^2 = (T_0 + T_2) / 2): the coefficients of T_1 and T_2
    exact binary numbers for these L, centre and variance."""
    s2 = variance
    return ChebyshevModel(coef=np.array([math.log(weight) - L * L / (4 * s2)
                                         - centre * centre / (2 * s2),
                                         centre * L / s2, -L * L / (4 * s2)]),
                          domain=(-L, L))


@pytest.mark.parametrize("weights", [(1.0, 1.0), (0.75, 0.25)])
def test_two_components_against_the_gaussian_closed_form(weights):
    # Gradshteyn & Ryzhik 3.896.4 per component (mass m_i = w_i s_i sqrt(2 pi)):
    # Z(mu)/Z(0) = sum_i m_i exp(i mu c_i - mu^2 s_i^2 / 2) / sum_i m_i, with
    # w_i = exp(c_0 + L^2 / (4 s_i^2) + c_i^2 / (2 s_i^2)) recomputed from the
    # model's own binary constant c_0 (the range +-32 leaves out less than
    # e^-150 of the weight). Near the zeros of Z the components cancel each
    # other: mu = pi / 28 is a zero of the equal mixture (cos 14 mu = 0), and
    # at mu = 15 the value is 1e-49; the route must still deliver 12 digits.
    L, c = 32.0, 14.0
    w1, w2 = weights
    first, second = gaussian_component(w1, -c, 1.0, L), gaussian_component(w2, c, 0.5, L)
    model = TwoComponentModel(first=first, second=second)
    mus = [Fraction(1, 10), Fraction(math.pi / 28 + 1e-4), Fraction(3, 2), Fraction(15)]
    tr = engine.transform([model], mus, digits=12)
    with mpmath.workdps(80):
        parts = []
        for comp, centre, var in ((first, -c, mpmath.mpf(1)), (second, c, mpmath.mpf("0.5"))):
            w = mpmath.exp(mpmath.mpf(comp.coef[0]) + L * L / (4 * var) + centre ** 2 / (2 * var))
            parts.append((w * mpmath.sqrt(var), centre, var))
        for k, mu in enumerate(mus):
            m = mpmath.mpf(mu.numerator) / mu.denominator
            exact = sum(w * mpmath.exp(1j * m * ce - m * m * v / 2) for w, ce, v in parts) \
                / sum(w for w, _, _ in parts)
            got = value(tr, k)
            assert abs(got - exact) <= 1e-12 * abs(exact), (mu, got, exact)
            assert abs(got - exact) <= tr.quad_err[0][k] + 1e-30 * abs(exact)
            assert tr.resolved[k]
