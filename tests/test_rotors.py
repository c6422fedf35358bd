"""The whole chain (Chebyshev fit of ln rho, ball-arithmetic Fourier integral,
error budget) on the exactly solvable independent-rotor model: V rotors with
weights exp(b cos t) and charge q = sum sin t.

Reference, computed here from mpmath's Bessel functions and nothing in
signfree: Z(mu)/Z(0) = (I0(sqrt(b^2 - mu^2)) / I0(b))^V (DLMF 10.32.1),
which for mu > b is (J0(sqrt(mu^2 - b^2)) / I0(b))^V (DLMF 10.27.6). For odd
V it changes sign at mu = sqrt(b^2 + j01^2), j01 = 2.404825557695773 the
first zero of J0 (DLMF Table 10.21.1).

Input: the exact ln rho (signfree.scenarios.rotor_log_density, 20 digits) on
an evenly spaced grid over [-0.8 V, 0.8 V], stated error 1e-10, half of it
from ln rho(-q) = ln rho(q) (rho is even, as exp(b cos t) is invariant under
t -> -t, which flips q).

What the route resolves here (V = 31, b = 0.5, 81 points): the values agree
with the reference to ~1e-9 relative up to D = -log10|Z/Z0| ~ 4 and stay
within their error bars to D ~ 10 (mu ~ 1.6). The density of V rotors is not
analytic (weak singularities at q = +-(V - 2k)), and the grid ends where
rho/rho(0) ~ 1e-11, so from mu ~ 1.7 on no row is 'ok'. The first sign
change (mu ~ 2.456, where |Z/Z0| ~ 1e-78) and the rows past it (D >= 13, as
(0.403 / I0(b))^V bounds |Z/Z0| there, 0.403 = max |J0| past j01) lie beyond
that: the tool has to say so instead of giving a sign.
"""
from fractions import Fraction

import mpmath
import numpy as np
import pytest

from signfree.analysis.analyse import analyse
from signfree.density import Density
from signfree.scenarios import rotor_log_density

V, B = 31, 0.5
J01 = mpmath.mpf("2.404825557695773")          # DLMF Table 10.21.1
MU0 = float(mpmath.sqrt(mpmath.mpf(B) ** 2 + J01 ** 2))
STEP = V / 50                                   # grid spacing in q
K_CORE = 40                                     # q up to 0.8 V
ERROR = 1e-10
MUS = [Fraction(k, 20) for k in range(81)]     # 0, 0.05, ..., 4


def exact(mu):
    """(I0(sqrt(b^2 - mu^2)) / I0(b))^V, as J0 for mu > b (DLMF 10.32.1,
    10.27.6), from mpmath directly."""
    with mpmath.workdps(40):
        mu = mpmath.mpf(mu.numerator) / mu.denominator
        b = mpmath.mpf(B)
        d = b * b - mu * mu
        single = mpmath.besseli(0, mpmath.sqrt(d)) if d >= 0 else mpmath.besselj(0, mpmath.sqrt(-d))
        return (single / mpmath.besseli(0, b)) ** V


@pytest.fixture(scope="module")
def half_grid():
    """ln rho at q_k = k STEP, k = 0..K_WIDE: 46 exact evaluations (about
    0.1-1.5 s each), shared by every test here."""
    q = np.array([k * STEP for k in range(K_CORE + 1)])
    y = np.array([float(rotor_log_density(qk, B, V, dps=20)[0]) for qk in q])
    return q, y


def density(half_grid, kmax):
    q, y = (a[: kmax + 1] for a in half_grid)
    q = np.concatenate([-q[:0:-1], q])
    y = np.concatenate([y[:0:-1], y])
    return Density(kind="log_density", q=q, value=y, error=np.full_like(q, ERROR),
                   error_source="stated")


@pytest.fixture(scope="module")
def core(half_grid):
    return analyse(density(half_grid, K_CORE), MUS, digits=12).table


def depth(mu):
    return float(-mpmath.log10(abs(exact(mu))))


def test_ok_rows_agree_with_the_bessel_form_within_their_errors(core):
    ok = [r for r in core.rows if r.status == "ok"]
    assert ok
    for r in ok:
        z = exact(r.mu)
        assert abs(r.value - z) <= r.total_err, float(r.mu)
        assert abs(r.value.imag) <= r.total_err
        if depth(r.mu) <= 4:
            assert abs(r.value - z) <= 1e-6 * abs(z), float(r.mu)
    # how far the route goes on these data (measured: D ~ 10 at mu = 1.6)
    deepest = max(depth(r.mu) for r in ok)
    assert deepest >= 9
    assert core.info["horizon"]["mu"] >= 1.5


def test_rows_past_mu_equal_b_follow_the_j0_form(core):
    # DLMF 10.27.6: for mu > b the factor is J0(sqrt(mu^2 - b^2)) / I0(b),
    # below 1 and falling; at least a few of these rows must be resolved.
    past = [r for r in core.rows if r.mu > Fraction(B) and r.status == "ok"]
    assert len(past) >= 5
    for r in past:
        z = exact(r.mu)
        with mpmath.workdps(30):
            mu = mpmath.mpf(r.mu.numerator) / r.mu.denominator
            i0 = mpmath.besseli(0, mpmath.sqrt(mpmath.mpf(B) ** 2 - mu * mu))  # imaginary argument
            assert abs(i0.imag) < 1e-25
            assert abs(i0.real / mpmath.besselj(0, mpmath.sqrt(mu * mu - B ** 2)) - 1) < 1e-25
        assert z > 0
        assert abs(r.value - z) <= r.total_err
        if depth(r.mu) <= 8:
            assert abs(r.value.real / z - 1) <= 1e-3, float(r.mu)


def test_no_confident_sign_at_the_first_bessel_zero(core):
    # The sign change at sqrt(b^2 + j01^2) (DLMF Table 10.21.1, odd V): if
    # the rows on both sides are 'ok' a reported bracket must hold it;
    # otherwise the zero is not resolved and no row past it may be 'ok'
    # (measured here: |Z/Z0| ~ 1e-78 and 1e-52 next to the zero and at most
    # ~1e-13 past it, all beyond these data). No 'ok' row may carry the
    # wrong sign.
    below = max((r for r in core.rows if float(r.mu) < MU0), key=lambda r: r.mu)
    above = min((r for r in core.rows if float(r.mu) > MU0), key=lambda r: r.mu)
    assert exact(below.mu) > 0 > exact(above.mu)
    if below.status == "ok" and above.status == "ok":
        assert any(lo <= MU0 <= hi for lo, hi in core.sign_changes())
    else:
        assert not any(r.status == "ok" for r in core.rows if float(r.mu) > MU0)
        assert core.info["horizon"]["first_lost_mu"] < MU0
    for r in core.rows:
        if r.status == "ok":
            assert r.value.real * exact(r.mu) > 0, float(r.mu)


def test_every_reported_sign_change_brackets_a_zero(core):
    # Every bracket must contain a sign change of the exact answer; on this
    # scan the only one is at sqrt(b^2 + j01^2) (DLMF Table 10.21.1).
    for lo, hi in core.sign_changes():
        assert exact(Fraction(lo)) * exact(Fraction(hi)) < 0, (lo, hi)
