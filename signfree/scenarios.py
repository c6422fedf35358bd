"""Exactly solvable reference models for testing and for the demo data.

Independent planar rotors in an imaginary field
-----------------------------------------------
A lattice of ``V`` independent rotors with angles ``t_i`` and coupling ``b``.
Each angle carries the weight ``exp(b cos t)``; the charge coupled to the
chemical potential is ``q = sum_i sin(t_i)``, so that

    Z(mu) = Int prod_i dt_i exp(b cos t_i + i mu sin t_i).

The single-rotor integral is a modified Bessel function (DLMF 10.32.1), hence

    Z(mu)/Z(0) = (I0(sqrt(b^2 - mu^2)) / I0(b))^V                (mu <= b)
               = (J0(sqrt(mu^2 - b^2)) / I0(b))^V                (mu >  b)

using I0(i x) = J0(x) (DLMF 10.27.6). For odd ``V`` the phase factor changes
sign at every ``mu = sqrt(b^2 + j_{0,k}^2)``, where ``j_{0,k}`` are the zeros
of J0: a genuine sign problem with a known answer.

The generalised density ``rho(q)`` is the probability density of the charge
in the phase-quenched ensemble (weights ``exp(b cos t_i)`` only). Here it is
normalised as a probability density, ``Int_{-V}^{V} rho(q) dq = 1``, so that
``Int rho(q) exp(i mu q) dq = Z(mu)/Z(0)`` with no further constant. Its
moment generating function is

    M(s) = Int rho(q) exp(s q) dq = (I0(sqrt(b^2 + s^2)) / I0(b))^V,

and ``rho`` is recovered from ``M`` by the inverse Laplace (Bromwich)
integral along a vertical line through the real saddle point of
``M(s) exp(-s q)``. ``rho`` is supported on ``[-V, V]`` and is smooth but not
analytic: at the points ``q = V - 2k`` it is only about ``V/2 - 2`` times
differentiable (the transform ``M(nu + i t)`` decays like ``|t|^(-V/2)``).
The singular parts are suppressed by roughly ``0.3^V`` relative to the bulk.
"""
from functools import lru_cache

import mpmath
import numpy as np
from scipy import optimize, special

__all__ = [
    "rotor_phase_factor",
    "rotor_log_density",
    "llr_slope",
    "sample_rotor_charges",
]

# Guard digits carried on top of the requested precision.
_GUARD = 8
# Bell widths per integration piece of the Bromwich integral.
_PIECE_WIDTHS = 2
# Safety limit on the number of pieces of the Bromwich integral.
_MAX_PIECES = 5000
# Quadrature rule per piece: the integrand is analytic in t, so
# Gauss-Legendre converges faster than tanh-sinh here.
_METHOD = "gauss-legendre"


def _check_volume(V):
    if int(V) != V or V < 1:
        raise ValueError(f"volume V must be a positive integer, got {V!r}")
    return int(V)


def rotor_phase_factor(mu, b, V, dps=50):
    """Exact Z(mu)/Z(0) of ``V`` independent planar rotors with coupling ``b``
    in the imaginary field ``i mu`` coupled to ``q = sum sin(theta)``.

    Returns an mpmath ``mpf`` correct to about ``dps`` significant digits:
    ``(I0(sqrt(b^2-mu^2))/I0(b))^V`` for ``|mu| < b``, ``I0(b)^(-V)`` at
    ``|mu| = b`` and ``(J0(sqrt(mu^2-b^2))/I0(b))^V`` for ``|mu| > b``.
    The phase factor is even in ``mu``.
    """
    V = _check_volume(V)
    with mpmath.workdps(dps + _GUARD):
        mu = abs(mpmath.mpf(mu))
        b = mpmath.mpf(b)
        norm = mpmath.besseli(0, b)
        d = b * b - mu * mu
        if d > 0:
            single = mpmath.besseli(0, mpmath.sqrt(d)) / norm
        elif d == 0:
            single = 1 / norm
        else:
            single = mpmath.besselj(0, mpmath.sqrt(-d)) / norm
        value = single ** V
    with mpmath.workdps(dps):
        return +value


def _bessel_ratio(r):
    """A(r) = I1(r)/I0(r) for real r >= 0 at the current precision."""
    return mpmath.besseli(1, r) / mpmath.besseli(0, r)


def _saddle_float(x, b):
    """Float solution nu >= 0 of nu A(r)/r = x, r = sqrt(b^2 + nu^2), for
    0 <= x < 1; a starting point for the high-precision Newton iteration."""
    if x == 0.0:
        return 0.0

    def h(nu):
        r = np.hypot(b, nu)
        return nu * special.i1e(r) / (special.i0e(r) * r) - x

    hi = 1.0
    while h(hi) < 0.0:
        hi *= 2.0
        if hi > 1e300:
            raise ValueError("charge too close to the edge of the support")
    return optimize.brentq(h, 0.0, hi, xtol=1e-15, rtol=1e-15)


def _saddle(q, b, V):
    """Real saddle point nu of ln M(nu) - nu q for 0 <= q < V at the current
    precision, with the cumulant-generating function's second derivative
    K''(nu) (the variance of q in the ensemble tilted by exp(nu q))."""

    def first(nu):
        r = mpmath.sqrt(b * b + nu * nu)
        return V * nu * _bessel_ratio(r) / r

    def second(nu):
        # d/dnu [nu A(r)/r] with A'(r) = 1 - A/r - A^2 and dr/dnu = nu/r.
        r = mpmath.sqrt(b * b + nu * nu)
        a = _bessel_ratio(r)
        return V * (a / r + nu * nu * (r - 2 * a - r * a * a) / r ** 3)

    if q == 0:
        return mpmath.mpf(0), second(mpmath.mpf(0))
    nu0 = mpmath.mpf(_saddle_float(float(q) / V, float(b)))
    nu = mpmath.findroot(lambda n: first(n) - q, nu0, solver="newton",
                         df=second)
    return nu, second(nu)


@lru_cache(maxsize=None)
def _log_density_nonneg(q, b, V, dps):
    """(ln rho, d ln rho/dq) for 0 <= q < V; arguments are mpf/int so that
    repeated evaluations (symmetric grids, shared nodes) are cached."""
    tol = mpmath.mpf(10) ** (-dps)
    nu, var = _saddle(q, b, V)
    r = mpmath.sqrt(b * b + nu * nu)
    i0_r = mpmath.besseli(0, r)
    log_m = V * (mpmath.log(i0_r) - mpmath.log(mpmath.besseli(0, b)))
    b2 = b * b
    largest = [mpmath.mpf(0)]

    def integrand(t):
        # f(t) = M(nu+it)/M(nu) exp(-i t q) = w^V exp(-i t q). I0(sqrt(x))
        # = 0F1(;1;x/4) is entire in x = b^2 + s^2, so no branch of the
        # square root is needed; f is formed as one complex exponential,
        # and as V is an integer the branch of the logarithm does not matter.
        s = mpmath.mpc(nu, t)
        w = mpmath.hyp0f1(1, (b2 + s * s) / 4) / i0_r
        if w == 0:
            return mpmath.mpc(0)
        e = V * mpmath.log(w) - mpmath.mpc(0, t * q)
        mag = mpmath.exp(e.real)
        f = mag * mpmath.expj(e.imag)
        if mag > largest[0]:
            largest[0] = mag
        # real part: Re f (for rho); imaginary part: t Im f (for rho').
        return mpmath.mpc(f.real, t * f.imag)

    # f(-t) = conj f(t), so the full line integral is twice the real part
    # of the half line. Pieces of a few bell widths, until the integrand
    # has stayed below tol (relative to its peak value 1) for two pieces.
    h = _PIECE_WIDTHS / mpmath.sqrt(var)
    total = mpmath.mpc(0)
    quiet = 0
    for k in range(_MAX_PIECES):
        largest[0] = mpmath.mpf(0)
        total += mpmath.quad(integrand, [k * h, (k + 1) * h], method=_METHOD)
        quiet = quiet + 1 if largest[0] < tol else 0
        if quiet == 2:
            break
    else:
        raise ValueError(
            f"Bromwich integral did not decay below 1e-{dps} within "
            f"{_MAX_PIECES} pieces (V = {V} too small for this method?)")
    re_int = total.real      # Int_0^inf Re f dt
    t_im_int = total.imag    # Int_0^inf t Im f dt
    # rho = M(nu) exp(-nu q) (1/pi) Int_0^inf Re f dt
    log_rho = log_m - nu * q + mpmath.log(re_int / mpmath.pi)
    # rho'/rho = -nu - [Int i t f]/[Int f] = -nu + Int t Im f / Int Re f
    # (exactly zero at q = 0, where rho is even about the point itself)
    slope = -nu + t_im_int / re_int if q != 0 else mpmath.mpf(0)
    return log_rho, slope


def rotor_log_density(q, b, V, dps=30):
    """Exact ``(ln rho(q), d ln rho/dq)`` of the charge ``q = sum sin(theta)``
    of ``V`` independent rotors with weights ``exp(b cos theta)``.

    ``rho`` is the probability density of ``q`` (``Int rho dq = 1``), valid
    for ``|q| < V``. It is evaluated from the inverse Laplace integral

        rho(q) = (1/2 pi) Int M(nu + i t) exp(-(nu + i t) q) dt

    with ``nu`` the real saddle point, ``q = V nu I1(r)/(r I0(r))``,
    ``r = sqrt(b^2 + nu^2)``, and ``M(nu) exp(-nu q)`` factored out so that
    the integrand is 1 at ``t = 0``. The ``t`` integral is done with
    ``mpmath.quad`` piece by piece until the integrand falls below
    ``10^-dps`` of its peak; this is fast for ``V >= 20``. The derivative is
    the same integral with an extra factor ``-(nu + i t)``.

    Returns two mpmath ``mpf`` to about ``dps`` digits (the absolute accuracy
    of ``ln rho`` is limited by the cut at ``10^-dps``).
    """
    V = _check_volume(V)
    with mpmath.workdps(dps + _GUARD):
        q = mpmath.mpf(q)
        b = mpmath.mpf(b)
        if not abs(q) < V:
            raise ValueError(f"charge q = {q} outside the open support "
                             f"(-{V}, {V})")
        log_rho, slope = _log_density_nonneg(abs(q), b, V, dps)
        if q < 0:
            slope = -slope
    with mpmath.workdps(dps):
        return +log_rho, +slope


@lru_cache(maxsize=None)
def _legendre_rule(n, dps):
    with mpmath.workdps(dps):
        return mpmath.gauss_quadrature(n, "legendre")


def llr_slope(q_lo, q_hi, b, V, n_nodes=12, dps=30):
    """Fixed point of an ideal Robbins-Monro (LLR) iteration on the interval
    ``[q_lo, q_hi]`` of the rotor model: the ``a`` solving

        Int_{q_lo}^{q_hi} (q - q_c) rho(q) exp(-a q) dq = 0,

    ``q_c`` the interval centre, i.e. the slope that makes the restricted,
    reweighted distribution have its mean at the centre. It equals
    ``d ln rho/dq`` at ``q_c`` up to ``(ln rho)''' w^2 / 40 + O(w^4)`` for
    width ``w``. The integral is an ``n_nodes``-point Gauss-Legendre sum
    over the exact ``ln rho``; the root is found by Newton's method (the
    left-hand side decreases strictly in ``a``). Returns an mpmath ``mpf``.
    """
    V = _check_volume(V)
    with mpmath.workdps(dps + _GUARD):
        q_lo = mpmath.mpf(q_lo)
        q_hi = mpmath.mpf(q_hi)
        if not q_lo < q_hi:
            raise ValueError("llr_slope needs q_lo < q_hi")
        if q_lo + q_hi < 0:
            # rho is even: the fixed point is odd under q -> -q.
            with mpmath.workdps(dps):
                return -llr_slope(-q_hi, -q_lo, b, V, n_nodes, dps)
        centre = (q_lo + q_hi) / 2
        half = (q_hi - q_lo) / 2
        xs, ws = _legendre_rule(n_nodes, dps + _GUARD)
        d = [half * x for x in xs]
        logs = [rotor_log_density(centre + di, b, V, dps)[0] for di in d]
        top = max(logs)
        base = [w * mpmath.exp(lr - top) for w, lr in zip(ws, logs)]

        def moment(a):
            return mpmath.fsum(bi * di * mpmath.exp(-a * di)
                               for bi, di in zip(base, d))

        def moment_slope(a):
            return -mpmath.fsum(bi * di * di * mpmath.exp(-a * di)
                                for bi, di in zip(base, d))

        # start: least-squares slope of ln rho over the nodes
        a0 = (mpmath.fsum(di * lr for di, lr in zip(d, logs))
              / mpmath.fsum(di * di for di in d))
        a = mpmath.findroot(moment, a0, solver="newton", df=moment_slope)
    with mpmath.workdps(dps):
        return +a


def sample_rotor_charges(n, b, V, rng, chunk=100_000):
    """``n`` independent samples of ``q = sum_i sin(theta_i)`` over ``V``
    rotors with ``theta_i`` drawn from the von Mises distribution
    ``exp(b cos theta)/(2 pi I0(b))``: exact sampling of the phase-quenched
    ensemble. ``rng`` is a ``numpy.random.Generator``; the draws are made in
    blocks of ``chunk`` samples, which consumes the generator exactly as one
    large draw would. Returns a float64 array of length ``n``."""
    V = _check_volume(V)
    n = int(n)
    out = np.empty(n, dtype=np.float64)
    for start in range(0, n, chunk):
        stop = min(start + chunk, n)
        theta = rng.vonmises(0.0, b, size=(stop - start, V))
        out[start:stop] = np.sin(theta).sum(axis=1)
    return out
