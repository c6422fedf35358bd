"""The charge density and its susceptibility of independent planar rotors,
at real, imaginary and complex mu, against Bessel-function closed forms.

V rotors with weights exp(b cos t) and charge q = sum sin t have
Z(mu)/Z(0) = (I0(r) / I0(b))^V, r = sqrt(b^2 - mu^2) (DLMF 10.32.1), for any
complex mu. With A = I1/I0, I0' = I1 (DLMF 10.29.3) and I1' = I0 - I1/r
(DLMF 10.29.2), so A' = 1 - A/r - A^2, and h(r) = A(r)/r:
    d ln Z / d mu = -V mu h(r),     d^2 ln Z / d mu^2 = -V (h - mu^2 h'(r) / r),
    n = <q>_mu / V = i mu h(r),     chi = h - mu^2 h'(r) / r,
h'(r) = (A' r - A) / r^2. At mu = i nu, r = sqrt(b^2 + nu^2) is real and
n = -nu h(r) is real: the Laplace transform of a positive density.
The closed forms are checked once against mpmath's numerical derivatives of
ln Z (a second, independent route).

Input as in tests/test_rotors.py: the exact ln rho (signfree.scenarios,
12 digits) on a grid over +-0.8 V, stated error 1e-10, symmetrised.
"""
from fractions import Fraction
from pathlib import Path

import mpmath
import numpy as np
import pytest
from scipy import stats

from signfree.analysis.analyse import analyse
from signfree.analysis.mu_spec import ComplexMu
from signfree.density import Density
from signfree.io.reading import read_density
from signfree.io.references import read_imaginary_reference
from signfree.scenarios import rotor_log_density

V, B = 31, 0.5
STEP = V / 50
K = 40
ERROR = 1e-10


def closed(mu):
    """(ln Z(mu)/Z(0), n, chi) from the module docstring, mu complex (at
    least 40 digits, more inside mpmath.diff)."""
    with mpmath.workdps(max(40, mpmath.mp.dps + 20)):
        mu = mpmath.mpmathify(mu)
        b = mpmath.mpf(B)
        r = mpmath.sqrt(b * b - mu * mu)
        i0, i1 = mpmath.besseli(0, r), mpmath.besseli(1, r)
        a = i1 / i0
        h = a / r
        da = 1 - a / r - a * a
        dh = (da * r - a) / r ** 2
        return (V * (mpmath.log(i0) - mpmath.log(mpmath.besseli(0, b))),
                1j * mu * h, h - mu * mu * dh / r)


def test_closed_forms_match_numerical_derivatives():
    # the reference itself, by a second route: mpmath.diff of ln Z (DLMF 10.32.1)
    for mu in (mpmath.mpf("0.3"), mpmath.mpf("1.2"), mpmath.mpc("0.2", "0.4"),
               mpmath.mpc(0, "0.7")):
        with mpmath.workdps(30):
            lnz = lambda m: closed(m)[0]
            d1, d2 = mpmath.diff(lnz, mu), mpmath.diff(lnz, mu, 2)
            _, n, chi = closed(mu)
            assert abs(n - (-1j * d1 / V)) < 1e-20
            assert abs(chi - (-d2 / V)) < 1e-20


@pytest.fixture(scope="module")
def rotors():
    q = np.array([k * STEP for k in range(K + 1)])
    y = np.array([float(rotor_log_density(qk, B, V, dps=12)[0]) for qk in q])
    q = np.concatenate([-q[:0:-1], q])
    y = np.concatenate([y[:0:-1], y])
    return Density(kind="log_density", q=q, value=y, error=np.full_like(q, ERROR),
                   error_source="stated", volume=float(V))


@pytest.fixture(scope="module")
def run(rotors):
    mus = [Fraction(k, 10) for k in range(0, 17, 2)]
    mus += [ComplexMu(Fraction(0), Fraction(k, 10)) for k in (2, 5, 10)]
    mus += [ComplexMu(Fraction(3, 10), Fraction(2, 10))]
    return analyse(rotors, mus, observables="n,chi")


def test_real_mu_ok_rows_hold_the_bessel_values(run):
    table = run.observables.real
    ok = 0
    for name, part in (("n", 1), ("chi", 2)):
        for mu, v in zip(table.mus, table.values[name]):
            exact = closed(mu)[part]
            if v.status != "ok":
                continue
            ok += 1
            assert abs(v.value - exact) <= v.total_err, (name, float(mu))
            if mu <= 1:   # up to 3.5 cancelled orders
                assert abs(v.value - exact) <= 1e-6 * abs(exact) + 1e-12, (name, float(mu))
    # measured: n ok to mu = 1.6 (D ~ 10), chi to mu = 1.4
    assert ok >= 14


def test_imaginary_and_complex_mu(run):
    part = run.observables.complex
    assert [str(r.mu) for r in part.rows] == ["0.2i", "0.5i", "i", "0.3+0.2i"]
    for k, row in enumerate(part.rows):
        mu = complex(row.mu)
        lnz, n, chi = closed(mu)
        z = mpmath.exp(lnz)
        assert row.status == "ok"
        assert abs(row.value - z) <= row.total_err
        # e^{-nu q} moves weight towards the end of the data (+-24.8 of the
        # support +-31): measured, the edge term is 1e-10 of |Z| at 0.2i and
        # 3e-5 at i, and the values agree accordingly
        assert abs(row.value - z) <= (1e-4 if mu.imag >= 0.5 else 1e-8) * abs(z)
        for name, exact in (("n", n), ("chi", chi)):
            v = part.values[name][k]
            assert v.status == "ok", (name, mu)
            assert abs(v.value - exact) <= v.total_err, (name, mu)
            assert abs(v.value - exact) <= (1e-3 if mu.imag >= 0.5 else 1e-6) * abs(exact)
    # on the imaginary axis n is real and negative (a positive weight e^{-nu q}
    # moves the mean of q down), and Delta f = -ln(I0(r)/I0(b)) is negative
    recs = part.records(run.table.columns())
    for rec, row in zip(recs[:3], part.rows[:3]):
        assert rec["n_imag"] == "0" and float(rec["n"]) < 0
        # Delta f = -ln|Z| / V, printed to the digits its total error supports
        exact = float(-closed(complex(row.mu))[0].real / V)
        assert abs(float(rec["delta_f"]) - exact) <= float(row.total_err / abs(row.value)) / V \
            + 10.0 ** (-len(rec["delta_f"].split(".")[1])) / 2


DEMO = Path(__file__).resolve().parent.parent / "data" / "demo"


def test_demo_simulation_at_imaginary_mu_and_its_check():
    # data/demo/rotors_imaginary.csv: exact von Mises sampling at mu = i nu of 63
    # rotors with b = 1. Against n = -nu I1(r)/(r I0(r)), r = sqrt(1 + nu^2)
    # (DLMF 10.32.1, 10.29.3) its chi^2 must be plausible (scipy.stats.chi2);
    # the smoothed demo slopes must predict the same n within their errors,
    # and the check must not reject them. The statistical part of total_err is
    # one standard error, and on these data one fluctuation of the fitted
    # curvature moves every point together (measured: 1.6 total errors at
    # nu = 0.3, 0.1 at nu = 0.6), so three are allowed.
    ref = read_imaginary_reference(DEMO / "rotors_imaginary.csv")
    with mpmath.workdps(30):
        exact = [float(-nu * mpmath.besseli(1, mpmath.sqrt(1 + nu * nu))
                       / (mpmath.sqrt(1 + nu * nu) * mpmath.besseli(0, mpmath.sqrt(1 + nu * nu))))
                 for nu in (mpmath.mpf(x.numerator) / x.denominator for x in ref.nu)]
    z = (np.array(ref.value) - exact) / np.array(ref.error)
    assert stats.chi2.sf(float(z @ z), len(z)) > 1e-3
    res = analyse(read_density(DEMO / "rotors_slopes.csv"), [Fraction(0)],
                  imaginary_reference=ref)
    check = res.observables.check
    assert check.dof == len(ref.nu) and check.p_value > 1e-3
    for v, e in zip(check.values, exact):
        assert v.status == "ok" and abs(v.value - e) <= 3 * v.total_err
