"""What the observables read: the mu grammar (pi, imaginary and complex mu),
the polynomial weights and their exact Chebyshev algebra, and the reference
file of measurements at imaginary mu."""
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from numpy.polynomial import chebyshev as C
from numpy.polynomial import polynomial as P

from signfree.analysis.mu_spec import ComplexMu, pi_fraction
from signfree.analysis.settings import Settings, parse_mu_spec
from signfree.analysis.weights import (chebyshev_product, in_window, parse_observables,
                                       parse_polynomial, power_in_chebyshev)
from signfree.errors import InputError
from signfree.io.references import read_imaginary_reference


def test_real_specs_stay_exact_fractions():
    assert parse_mu_spec("0.1,0.5,1") == [Fraction(1, 10), Fraction(1, 2), Fraction(1)]
    assert parse_mu_spec("0:2:5") == [Fraction(k, 2) for k in range(5)]
    assert parse_mu_spec("-1:1:3") == [Fraction(-1), Fraction(0), Fraction(1)]
    assert parse_mu_spec("1/3,1e-3") == [Fraction(1, 3), Fraction(1, 1000)]
    assert all(type(m) is Fraction for m in parse_mu_spec("0:2pi:7"))


def test_pi_multiples_against_mpmath():
    # mpmath's pi at 1100 digits as the reference: pi is carried to 1e-1040
    with mpmath.workdps(1100):
        pi = +mpmath.pi
        got = pi_fraction()
        assert abs(mpmath.mpf(got.numerator) / got.denominator - pi) < mpmath.mpf(10) ** -1040
        for spec, factor in (("pi/2", Fraction(1, 2)), ("3pi/4", Fraction(3, 4)),
                             ("2*pi", Fraction(2)), ("-pi", Fraction(-1))):
            (m,) = parse_mu_spec(spec)
            assert m == factor * got
        grid = parse_mu_spec("0:2pi:61")
        assert len(grid) == 61 and grid[-1] == 2 * got and grid[30] == got
        assert grid[1] - grid[0] == grid[-1] - grid[-2]   # an exact even grid


def test_imaginary_and_complex_values():
    assert parse_mu_spec("0.5i", allow_complex=True) == [ComplexMu(Fraction(0), Fraction(1, 2))]
    grid = parse_mu_spec("0:1i:11", allow_complex=True)
    assert grid[0] == 0 and type(grid[0]) is Fraction
    assert grid[1:] == [ComplexMu(Fraction(0), Fraction(k, 10)) for k in range(1, 11)]
    assert parse_mu_spec("0.3+0.2i", allow_complex=True) == \
        [ComplexMu(Fraction(3, 10), Fraction(1, 5))]
    assert parse_mu_spec("0:1:3,-i", allow_complex=True)[-1] == ComplexMu(Fraction(0),
                                                                          Fraction(-1))
    (m,) = parse_mu_spec("2*pi*i", allow_complex=True)
    assert m.imag == 2 * pi_fraction() and m.real == 0
    assert [str(m) for m in parse_mu_spec("0.5i,0.3-0.25i,i", allow_complex=True)] == \
        ["0.5i", "0.3-0.25i", "i"]


@pytest.mark.parametrize("spec", ["", "a", "1//2", "pi^2", "pipi", "0:1:x", "0:1", "3 4",
                                  "1/0", "0:1:0", "*2"])
def test_bad_specs_name_the_option(spec):
    with pytest.raises(ValueError, match="--mu"):
        parse_mu_spec(spec, allow_complex=True)


def test_commands_for_real_mu_refuse_complex_values():
    with pytest.raises(ValueError, match="real mu only"):
        parse_mu_spec("0:1i:3")


def test_observable_names_and_polynomials():
    obs = parse_observables("n,chi,q^2, 2q^3 - q/2 + 1")
    assert [o.name for o in obs] == ["n", "chi", "<q^2>", "<2q^3-q/2+1>"]
    assert obs[3].poly == (1, Fraction(-1, 2), 0, 2)
    assert [o.order for o in obs] == [1, 2, 2, 3]
    assert parse_polynomial("q*q") == (0, 0, 1)
    for bad in ("q^", "x", "0", "q^13", "q*", "n,n"):
        with pytest.raises(ValueError, match="--observables"):
            parse_observables(bad)
    with pytest.raises(ValueError, match="--observables"):
        Settings(observables="n,q^x")
    assert Settings(observables="n, chi").observables == ("n", "chi")


def test_power_to_chebyshev_against_numpy():
    # numpy.polynomial.chebyshev.poly2cheb as the reference
    for n in range(13):
        ref = C.poly2cheb([0] * n + [1])
        assert np.allclose([float(c) for c in power_in_chebyshev(n)], ref, atol=1e-15)


def test_weight_in_window_against_numpy():
    # O(mid + half x) == sum_k u_k T_k(x), checked with numpy.polynomial
    rng = np.random.default_rng(3)
    poly = (1, Fraction(-1, 2), 0, 2, Fraction(1, 3))
    domain = (-3.5, 7.25)
    u = [float(c) for c in in_window(poly, domain)]
    x = rng.uniform(-1, 1, 50)
    q = 0.5 * (domain[0] + domain[1]) + 0.5 * (domain[1] - domain[0]) * x
    assert np.allclose(C.chebval(x, u), P.polyval(q, [float(c) for c in poly]), rtol=1e-12)


def test_chebyshev_product_against_numpy():
    u, v = [Fraction(1), Fraction(-2), Fraction(3, 4)], [Fraction(0), Fraction(0), Fraction(0),
                                                           Fraction(5)]
    assert np.allclose([float(c) for c in chebyshev_product(u, v)],
                       C.chebmul([float(c) for c in u], [float(c) for c in v]))


def test_reference_file(tmp_path):
    f = tmp_path / "ref.csv"
    f.write_text("# quantity: n\nnu,value,error\n0.2,-0.1,0.01\n0.1,-0.05,0.01\n")
    ref = read_imaginary_reference(f)
    assert ref.nu == (Fraction(1, 10), Fraction(1, 5)) and ref.value == (-0.05, -0.1)
    assert ref.metadata == {"quantity": "n"}


@pytest.mark.parametrize("text, where", [
    ("nu,value\n0.1,1\n", "ref.csv:1: missing column"),
    ("nu,value,error\n0.1,x,0.1\n", "ref.csv:2:2:"),
    ("nu,value,error\n0.1,1,0\n", "ref.csv:2:3:"),
    ("nu,value,error\n0.1,1,0.1\n0.10,1,0.1\n", "ref.csv:3:1:"),
    ("nu,value,error\n0.1,1\n", "ref.csv:2: expected 3 fields"),
    ("nu,value,error\n", "no data rows"),
])
def test_bad_reference_files(tmp_path, text, where):
    f = tmp_path / "ref.csv"
    f.write_text(text)
    with pytest.raises(InputError) as exc:
        read_imaginary_reference(f)
    assert where in str(exc.value).replace(str(tmp_path) + "/", "")
