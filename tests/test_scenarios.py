"""Checks of the exactly solvable rotor model in signfree.scenarios against
independent numerical integration and known special-function facts."""
import mpmath
import numpy as np
import pytest

from signfree.scenarios import (
    llr_slope,
    rotor_log_density,
    rotor_phase_factor,
    sample_rotor_charges,
)


def _direct_phase_factor(mu, b, V):
    """Int_0^{2pi} exp(b cos t + i mu sin t) dt / (2 pi I0(b)), to the power
    V, by direct quadrature (30 digits). Returns (value, imaginary part of
    the single-rotor integral)."""
    with mpmath.workdps(30):
        mu = mpmath.mpf(mu)
        b = mpmath.mpf(b)
        single = mpmath.quad(
            lambda t: mpmath.exp(b * mpmath.cos(t)
                                 + 1j * mu * mpmath.sin(t)),
            [0, mpmath.pi / 2, mpmath.pi, 3 * mpmath.pi / 2, 2 * mpmath.pi])
        single /= 2 * mpmath.pi * mpmath.besseli(0, b)
        return single.real ** V, single.imag


# Source: DLMF 10.32.1 (integral representation of I0) for mu < b, and
# DLMF 10.27.6 (I0(i x) = J0(x)) for mu > b; the single-rotor integral is
# real because the sin part is odd under t -> -t.
@pytest.mark.parametrize("mu,b,V", [
    ("0.5", "1.0", 7),
    ("0.999", "1.0", 63),
    ("1.0", "1.0", 3),
    ("1.3", "0.7", 4),
    ("2.5", "1.0", 7),
    ("3.0", "1.0", 5),
    ("6.0", "2.0", 11),
])
def test_phase_factor_matches_direct_integral(mu, b, V):
    direct, imag = _direct_phase_factor(mu, b, V)
    exact = rotor_phase_factor(mu, b, V, dps=30)
    assert abs(imag) < mpmath.mpf(10) ** -25
    assert abs(exact / direct - 1) < mpmath.mpf(10) ** -22
    # the phase factor is even in mu
    assert rotor_phase_factor("-" + mu, b, V, dps=30) == exact


# Source: DLMF Table 10.21.1, first zero of J0, j_{0,1} = 2.404825557695773;
# with DLMF 10.27.6 the single-rotor factor vanishes at
# mu = sqrt(b^2 + j_{0,1}^2), so an odd power changes sign there and an even
# power does not.
def test_sign_change_at_first_bessel_zero():
    j01 = mpmath.mpf("2.404825557695773")
    mu0 = mpmath.sqrt(1 + j01 ** 2)
    below, above = mu0 - mpmath.mpf("1e-6"), mu0 + mpmath.mpf("1e-6")
    assert rotor_phase_factor(below, 1.0, 63) > 0
    assert rotor_phase_factor(above, 1.0, 63) < 0
    assert rotor_phase_factor(below, 1.0, 62) > 0
    assert rotor_phase_factor(above, 1.0, 62) > 0
    # no sign change between mu = b and just below the zero
    for mu in np.linspace(1.0, float(below), 12):
        assert rotor_phase_factor(mu, 1.0, 63) > 0
    with mpmath.workdps(30):
        root = mpmath.findroot(lambda m: rotor_phase_factor(m, 1, 1, dps=30),
                               mpmath.mpf("2.6"))
    assert abs(root - mu0) < 1e-14


def test_log_density_normalisation_and_fourier_transform():
    # Source: rho is the probability density of q, so Int rho dq = 1 and its
    # Fourier transform is the characteristic function, which is the exact
    # Z(mu)/Z(0) (DLMF 10.32.1). Reference integrator: mpmath.quad with
    # Gauss-Legendre rules on [0, 24] (rho is even; beyond q = 24 rho is
    # below 1e-12 for V = 30, b = 1).
    V, b, dps = 30, 1.0, 12
    cache = {}

    def rho(q):
        if q not in cache:
            cache[q] = mpmath.exp(rotor_log_density(q, b, V, dps=dps)[0])
        return cache[q]

    edges = [0, 6, 12, 18, 24]
    with mpmath.workdps(dps):
        assert rho(mpmath.mpf(24)) < mpmath.mpf(10) ** -12
        norm = 2 * mpmath.quad(rho, edges, method="gauss-legendre")
        assert abs(norm - 1) < 1e-8
        for mu in ("0.3", "0.8"):
            m = mpmath.mpf(mu)
            z = 2 * mpmath.quad(lambda q: rho(q) * mpmath.cos(m * q), edges,
                                method="gauss-legendre")
            exact = rotor_phase_factor(mu, b, V)
            assert abs(z / exact - 1) < 1e-8


def test_log_density_slope_and_symmetry():
    # Source: the returned slope is d ln rho/dq (checked against a central
    # difference, error ~ h^2 (ln rho)'''/6), and rho is even because the
    # weight exp(b cos t) is invariant under t -> -t, which flips q.
    V, b, dps = 63, 1.0, 20
    q, h = mpmath.mpf("13.25"), mpmath.mpf("1e-4")
    lr, slope = rotor_log_density(q, b, V, dps)
    up = rotor_log_density(q + h, b, V, dps)[0]
    down = rotor_log_density(q - h, b, V, dps)[0]
    assert abs((up - down) / (2 * h) - slope) < 1e-10
    lr_m, slope_m = rotor_log_density(-q, b, V, dps)
    with mpmath.workdps(dps):
        assert lr_m == lr and slope_m == -slope
    # at q = 0 the saddle point is nu = 0 and the slope vanishes
    assert rotor_log_density(0, b, V, dps)[1] == 0
    with pytest.raises(ValueError):
        rotor_log_density(V, b, V)


def test_llr_slope_converges_quadratically_in_width():
    # Source: Taylor expansion of the fixed-point condition
    # Int (q - q_c) rho(q) exp(-a q) dq = 0 gives
    # a = (ln rho)'(q_c) + (ln rho)'''(q_c) w^2 / 40 + O(w^4); the O(w^2)
    # convergence of the LLR slope to the derivative is the common practice
    # statement, so the error drops by ~4 when the width halves.
    V, b, dps = 63, 1.0, 20
    qc = mpmath.mpf(20)
    exact = rotor_log_density(qc, b, V, dps)[1]
    err = {w: llr_slope(qc - mpmath.mpf(w) / 2, qc + mpmath.mpf(w) / 2,
                        b, V, dps=dps) - exact
           for w in ("1", "0.5")}
    ratio = err["1"] / err["0.5"]
    assert 3.8 < ratio < 4.2
    h = mpmath.mpf(1)
    third = (rotor_log_density(qc + h, b, V, dps)[1] - 2 * exact
             + rotor_log_density(qc - h, b, V, dps)[1]) / h ** 2
    assert abs(err["1"] / (third / 40) - 1) < 0.02
    # odd under q -> -q, as rho is even
    left = llr_slope(-20.5, -19.5, b, V, dps=dps)
    right = llr_slope(19.5, 20.5, b, V, dps=dps)
    with mpmath.workdps(dps):
        assert left == -right


def test_sample_moments_and_determinism():
    # Source: von Mises moments E[cos n t] = I_n(b)/I0(b), so E[sin t] = 0
    # and E[sin^2 t] = (1 - I2(b)/I0(b))/2 = I1(b)/(b I0(b)) (recurrence
    # I0 - I2 = 2 I1/b); the V rotors are independent. Tolerance: 5 standard
    # errors, the variance's standard error from the sample fourth moment.
    n, b, V = 200_000, 1.0, 20
    q = sample_rotor_charges(n, b, V, np.random.default_rng(20250101))
    assert q.shape == (n,)
    var_exact = V * float(mpmath.besseli(1, b) / (b * mpmath.besseli(0, b)))
    mean = q.mean()
    assert abs(mean) < 5 * np.sqrt(var_exact / n)
    c = q - mean
    var = np.mean(c ** 2)
    se_var = np.sqrt((np.mean(c ** 4) - var ** 2) / n)
    assert abs(var - var_exact) < 5 * se_var
    # the block size does not change the stream
    a = sample_rotor_charges(1000, b, 5, np.random.default_rng(7), chunk=77)
    z = sample_rotor_charges(1000, b, 5, np.random.default_rng(7))
    assert np.array_equal(a, z)
