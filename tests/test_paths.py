"""The path through the saddle against sources outside the project: the
Gaussian closed form (Gradshteyn & Ryzhik 3.896.4), python-flint's certified
acb.integral along a path the test builds itself, mpmath.quad and
mpmath.findroot, and the real-axis route of the engine on the same model."""
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from flint import acb, arb, ctx
from numpy.polynomial import chebyshev as C

from signfree import engine
from signfree.engine import paths
from signfree.models.chebyshev import ChebyshevModel


def gaussian_model(half_range):
    """ln rho = -q^2/2 on [-L, L], exactly: -L^2/4 (T_0 + T_2)(q/L) = -q^2/2
    (L a power of two keeps the coefficients and their products exact)."""
    c = -(half_range ** 2) / 4
    return ChebyshevModel(coef=np.array([c, 0.0, c]), domain=(-half_range, half_range),
                          parity="even")


def polynomial_model(power_coefs, half_range):
    """ln rho = sum_k a_k q^k on [-L, L] as a Chebyshev series in q / L
    (numpy.polynomial.chebyshev.poly2cheb)."""
    scaled = [a * half_range ** k for k, a in enumerate(power_coefs)]
    return ChebyshevModel(coef=C.poly2cheb(scaled), domain=(-half_range, half_range))


def value(tr, k):
    z = tr.values[0][k]
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def flint_rectangle(lnrho, mu, L, height, prec):
    """Int_{-L}^{L} exp(lnrho(q) + i mu q) dq by python-flint's rigorous
    acb.integral along -L -> -L + i h -> L + i h -> L (Cauchy's theorem; the
    integrand is entire), and Int exp(lnrho) dq on the real axis: the ratio
    as an acb ball."""
    with ctx.workprec(prec):
        m = arb(mu)
        f = lambda q, _: (lnrho(q) + acb(0, m) * q).exp()
        # absolute tolerance below the largest |integrand| on the horizontal line
        top = max(abs(f(acb(x, height), False)) for x in np.linspace(-L, L, 257))
        corners = [acb(-L), acb(-L, height), acb(L, height), acb(L)]
        num = sum((acb.integral(f, s, e, rel_tol=arb(2) ** (-prec + 10),
                                abs_tol=top * arb(2) ** (-prec + 10))
                   for s, e in zip(corners[:-1], corners[1:])), acb(0))
        den = acb.integral(lambda q, _: lnrho(q).exp(), -L, L, rel_tol=arb(2) ** (-prec + 10))
        return num / den


@pytest.mark.parametrize("depth", [50, 500, 2000])
def test_gaussian_through_the_saddle_at_any_depth(depth):
    # Gradshteyn & Ryzhik 3.896.4: Int exp(-q^2/2) cos(mu q) dq = sqrt(2 pi) exp(-mu^2/2);
    # with L = 128 the range cuts off below exp(-8192), far under 10^-2000.
    mu = Fraction(math.sqrt(2 * depth * math.log(10)))
    tr = engine.transform([gaussian_model(128.0)], [Fraction(1, 3), mu], digits=15)
    with mpmath.workdps(depth + 40):
        m = mpmath.mpf(mu.numerator) / mu.denominator
        exact = mpmath.exp(-m ** 2 / 2)
        got = value(tr, 1)
        assert abs(got - exact) <= tr.quad_err[0][1]
        assert abs(got - exact) <= 1e-15 * exact
        assert -mpmath.log10(exact) == pytest.approx(depth, rel=1e-9)
        # python-flint's acb.integral along the test's own rectangle through i mu
        ref = flint_rectangle(lambda q: -q * q / 2, float(mu), 128, float(mu), 128)
        assert abs(engine.to_mpf(ref.real) / exact - 1) < 1e-15
    assert all(tr.resolved)
    # the horizontal line passes through the saddle q* = i mu (sigma = 1) and the sum
    # does not cancel there, so the precision stays far below the depth
    assert tr.heights[1] == pytest.approx(float(mu), rel=0.05)
    assert tr.path_orders[1] < 3
    assert tr.prec < 400


@pytest.mark.parametrize("depth", [50, pytest.param(500, marks=pytest.mark.slow)])
def test_path_agrees_with_the_real_axis(depth):
    # The same model by both routes of the engine: the real axis (precision above the
    # depth) and the path through the saddle; GR 3.896.4 as the judge of both.
    L = 32.0 if depth == 50 else 64.0   # edges below exp(-512) and exp(-2048)
    mus = [Fraction(k, 4) for k in range(0, int(4 * math.sqrt(2 * depth * math.log(10))) + 1, 3)]
    model = gaussian_model(L)
    auto = engine.transform([model], mus, digits=14)
    real = engine.transform([model], mus, digits=14, path="real")
    assert auto.method == "gauss-legendre-path" and real.method == "gauss-legendre"
    assert real.prec > depth * math.log2(10) and real.prec > auto.prec
    with mpmath.workdps(depth + 40):
        for k, mu in enumerate(mus):
            a, r = value(auto, k), value(real, k)
            exact = mpmath.exp(-(mpmath.mpf(mu.numerator) / mu.denominator) ** 2 / 2)
            assert abs(a - r) <= auto.quad_err[0][k] + real.quad_err[0][k]
            assert abs(a - exact) <= 1e-14 * exact
    assert all(auto.resolved) and all(real.resolved)


def test_certified_path_encloses_the_closed_form():
    # acb.integral applied panel by panel along the engine's path: the ball must hold
    # GR 3.896.4 at 700 cancelled orders, at a precision far below the depth.
    mu = Fraction(math.sqrt(2 * 700 * math.log(10)))
    tr = engine.transform([gaussian_model(128.0)], [mu], digits=12, certify=True)
    assert tr.method == "acb.integral-path"
    z = tr.values[0][0]
    with mpmath.workdps(760):
        exact = mpmath.exp(-(mpmath.mpf(mu.numerator) / mu.denominator) ** 2 / 2)
        mid, rad = engine.to_mpf(z.real), engine.upper(z.real - z.real.mid())
        assert abs(mid - exact) <= rad + engine.upper(z.real.rad())
        assert rad < 1e-12 * exact
    assert tr.resolved[0] and tr.prec < 400


# an asymmetric polynomial ln rho: the saddle leaves the imaginary axis
ASYMMETRIC = [0.0, 0.3, -0.5, 0.02, -0.002]


def test_asymmetric_model_saddle_off_the_imaginary_axis():
    L = 16.0
    model = polynomial_model(ASYMMETRIC, L)
    mus = [Fraction(k, 2) for k in range(0, 41)]
    auto = engine.transform([model], mus, digits=15)
    real = engine.transform([model], mus, digits=15, path="real")
    dlnrho = lambda q: sum(k * a * q ** (k - 1) for k, a in enumerate(ASYMMETRIC) if k)
    with mpmath.workdps(60):
        for k in (20, 30, 40):
            mu = float(mus[k])
            # mpmath.findroot: the saddle p'(q*) = -i mu, started at the Gaussian guess
            star = mpmath.findroot(lambda q: dlnrho(q) + 1j * mu, 1j * mu)
            assert abs(star.real) > 0.05 and auto.heights[k] > 0
            assert abs(auto.heights[k] - float(star.imag)) < 0.25 * float(star.imag)
            # python-flint's acb.integral along the test's rectangle through Im q*
            ref = flint_rectangle(lambda q: sum(arb(a) * q ** j for j, a in
                                                enumerate(ASYMMETRIC)), mu, L, float(star.imag), 192)
            ref = mpmath.mpc(engine.to_mpf(ref.real), engine.to_mpf(ref.imag))
            got = value(auto, k)
            assert abs(got - ref) <= 1e-14 * abs(ref)
            assert abs(got - value(real, k)) <= auto.quad_err[0][k] + real.quad_err[0][k]
            assert abs(got.imag) > 1e-3 * abs(got)       # the answer is complex
        assert -mpmath.log10(abs(value(auto, 40))) > 40
    assert all(auto.resolved)


def test_odd_model_against_flint():
    # ln rho odd in q (parity 'odd'): its largest value sits at the left end, so
    # Z is carried by the edge term and the planner has nothing to gain off the axis;
    # the answer must match python-flint's acb.integral whatever path is taken.
    L = 2.0
    power = [0.0, -3.0, 0.0, 0.5]
    model = polynomial_model(power, L)
    model = ChebyshevModel(coef=model.coef, domain=model.domain, parity="odd")
    mus = [Fraction(k) for k in range(0, 81, 4)]
    tr = engine.transform([model], mus, digits=15)
    for k in (5, 10, 20):
        ref = flint_rectangle(lambda q: arb(-3) * q + arb(0.5) * q ** 3, float(mus[k]), L, 0.0, 128)
        ref = mpmath.mpc(engine.to_mpf(ref.real), engine.to_mpf(ref.imag))
        assert abs(value(tr, k) - ref) <= 1e-14 * abs(ref)
    assert all(tr.resolved)


def wobbly_model():
    """A Chebyshev interpolant of ln rho = -q^2/2 + ln(1 + 0.5 cos 2q) on [-12, 12]:
    ln(1 + 0.5 cos 2q) has complex singularities at Im q = +-0.66, so its
    polynomial interpolant grows quickly off the real axis."""
    f = lambda q: -q ** 2 / 2 + np.log(1 + 0.5 * np.cos(2 * q))
    x = np.cos(np.pi * (np.arange(61) + 0.5) / 61)
    return ChebyshevModel(coef=C.chebfit(x, f(12 * x), 60), domain=(-12.0, 12.0))


def test_path_choice_falls_back_to_the_real_axis():
    # Off the real axis the wobbly model's integrand is far larger than on it: at the
    # Gaussian saddle height mu the largest |integrand| exceeds the real axis' by many
    # orders (mpmath evaluation of the same Chebyshev series), so the planner must keep
    # the real axis, and the answer must match mpmath.quad.
    model = wobbly_model()
    mus = [Fraction(k, 2) for k in range(0, 21)]
    mu = 8.0
    with mpmath.workdps(30):
        coef = [mpmath.mpf(float(c)) for c in model.coef]
        def p(q):
            x = q / 12
            b1 = b2 = 0
            for c in reversed(coef[1:]):
                b1, b2 = 2 * x * b1 - b2 + c, b1
            return x * b1 - b2 + coef[0]
        line = max(mpmath.re(p(x + 1j * mu)) - mu * mu for x in mpmath.linspace(-12, 12, 241))
        axis = max(mpmath.re(p(x)) for x in mpmath.linspace(-12, 12, 241))
        assert line - axis > 20 * math.log(10)
    groups = paths.plan(model.coef, model.domain, [float(m) for m in mus], 14)
    assert all(g.path.height == 0 for g in groups)
    tr = engine.transform([model], mus, digits=14)
    assert tr.method == "gauss-legendre"
    with mpmath.workdps(24):
        pts = mpmath.linspace(-12, 12, 25)
        den = mpmath.quad(lambda q: mpmath.exp(p(q)), pts, method="gauss-legendre")
        for k in (12, 20):
            m = mpmath.mpf(mus[k].numerator) / mus[k].denominator
            num = mpmath.quad(lambda q: mpmath.exp(p(q)) * mpmath.cos(m * q), pts,
                              method="gauss-legendre")
            ref = num / den
            assert abs(value(tr, k).real - ref) <= 1e-13 * abs(ref) + tr.quad_err[0][k]


def test_replicas_and_gradients_ride_along_the_path():
    # Replica rows and gradient rows go through the same path. Each replica is a
    # Gaussian of another width (GR 3.896.4 again); the gradient row dZ/dc_2 / Z(0)
    # against the closed form of Int T_2(q/L) e^{-q^2/2 + i mu q} dq.
    L = 64.0
    rows = [gaussian_model(L)]
    for s2 in (0.96, 1.04):   # replicas near the central model, as resamples are
        c = -(L ** 2) / (4 * s2)
        rows.append(ChebyshevModel(coef=np.array([c, 0.0, c]), domain=(-L, L), parity="even"))
    mus = [Fraction(k, 2) for k in range(0, 48)]
    tr = engine.transform(rows, mus, digits=12, check_rows=1, gradient=(2,))
    assert tr.method == "gauss-legendre-path"
    with mpmath.workdps(200):
        for r, s2 in enumerate((1.0, 0.96, 1.04)):
            for k in (10, 30, 47):
                m = mpmath.mpf(mus[k].numerator) / mus[k].denominator
                exact = mpmath.exp(-m ** 2 * s2 / 2)
                z = tr.values[r][k]
                got = mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))
                assert abs(got - exact) <= 1e-11 * exact
        # d/dc_2 of Int exp(c_0 + c_2 T_2(q/L) + i mu q) / Z(0) = Int T_2 exp(...) / Z(0);
        # with T_2(x) = 2 x^2 - 1 and the Gaussian moments (GR 3.896.4 differentiated
        # in its parameter): Int (2 q^2/L^2 - 1) e^{-q^2/2 + i mu q} / sqrt(2 pi)
        #   = ((2/L^2)(1 - mu^2) - 1) exp(-mu^2/2)
        rows_k, grad0 = tr.gradient
        for k in (10, 30, 47):
            m = mpmath.mpf(mus[k].numerator) / mus[k].denominator
            exact = ((2 / mpmath.mpf(L) ** 2) * (1 - m ** 2) - 1) * mpmath.exp(-m ** 2 / 2)
            g = rows_k[0][k]
            got = mpmath.mpc(engine.to_mpf(g.real), engine.to_mpf(g.imag))
            assert abs(got - exact) <= 1e-11 * abs(exact)
        g0 = engine.to_mpf(grad0[0].real)
        assert abs(g0 - (2 / mpmath.mpf(L) ** 2 - 1)) < 1e-11


def test_rule_cache_stays_within_its_budget(tmp_path, monkeypatch):
    # Gauss-Legendre rules read back from the disk cache equal Arb's own
    # (arb_hypgeom_legendre_p_ui_root), and the cache keeps within its byte budget.
    from signfree.engine import rules
    monkeypatch.setenv("SIGNFREE_CACHE", str(tmp_path))
    monkeypatch.setattr(rules, "_NODES", {})
    for n in (256, 282, 311):
        rules.gauss_legendre(n, 128)
    sizes = {p.name: p.stat().st_size for p in tmp_path.glob("gauss-legendre-*.txt")}
    assert len(sizes) == 3
    # a rule at a higher precision makes the lower one redundant
    monkeypatch.setattr(rules, "_NODES", {})
    rules.gauss_legendre(256, 256)
    names = {p.name for p in tmp_path.glob("gauss-legendre-*.txt")}
    assert "gauss-legendre-256-128.txt" not in names and "gauss-legendre-256-256.txt" in names
    # a tight budget evicts the least recently used
    rules._evict(tmp_path, sizes["gauss-legendre-311-128.txt"] + 10)
    left = sorted(p.name for p in tmp_path.glob("gauss-legendre-*.txt"))
    assert len(left) == 1
    monkeypatch.setattr(rules, "_NODES", {})
    xs, ws = rules.gauss_legendre(256, 256)
    with ctx.workprec(256):
        x0, w0 = arb.legendre_p_root(256, 0, weight=True)
        total = sum(ws, arb(0))
    assert xs[0].overlaps(x0) and ws[0].overlaps(w0)
    assert total.overlaps(arb(2)) and total.rad() < 1e-60   # weights sum to 2 (common practice)


def test_complex_mu_through_the_saddle():
    # Z at complex mu (the zeros and the cumulant radius use it): for the Gaussian
    # Int exp(-q^2/2 + i mu q) dq = sqrt(2 pi) exp(-mu^2/2) holds for every complex mu
    # (GR 3.896.4, continued analytically: both sides are entire in mu). A box far from
    # Re mu = 0 is integrated along one shifted path.
    from signfree.engine.complex_mu import Evaluator, phase_factor
    model = gaussian_model(64.0)
    ev = Evaluator(model, (38, 42, -3, 3), 15)
    assert ev.path is not None and ev.path.height > 0 and ev.prec < 400
    start, step = (Fraction(38), Fraction(-3)), (Fraction(1, 2), Fraction(3, 4))
    zs, ds = ev.segment(start, step, 9, want_bits=50)
    with mpmath.workdps(60):
        for k in range(9):
            mu = mpmath.mpc(38 + k / 2, -3 + 3 * k / 4)
            exact = mpmath.sqrt(2 * mpmath.pi) * mpmath.exp(-mu ** 2 / 2 - ev.shift)
            got = mpmath.mpc(engine.to_mpf(zs[k].real), engine.to_mpf(zs[k].imag))
            assert abs(got - exact) <= 1e-14 * abs(exact)
            # Z'(mu) = i Int q exp(...) dq = -mu Z(mu) for the Gaussian
            d = mpmath.mpc(engine.to_mpf(ds[k].real), engine.to_mpf(ds[k].imag))
            assert abs(d + mu * exact) <= 1e-13 * abs(mu * exact)
        assert -mpmath.log10(abs(exact)) > 300
        z = phase_factor(model, complex(40, -2), digits=15)
        exact = mpmath.exp(-mpmath.mpc(40, -2) ** 2 / 2)
        assert abs(z - exact) <= 1e-14 * abs(exact)


def test_sparse_deep_mu_list_keeps_tight_error_bounds():
    # A few uneven mu spanning hundreds of orders share paths; each row's quad_err
    # must stay relative to its own |Z| (GR 3.896.4 as the judge).
    mus = [Fraction(30), Fraction(34), Fraction(38), Fraction(47), Fraction(48)]
    tr = engine.transform([gaussian_model(128.0)], mus, digits=15)
    with mpmath.workdps(600):
        for k, mu in enumerate(mus):
            exact = mpmath.exp(-mpmath.mpf(mu) ** 2 / 2)
            assert abs(value(tr, k) - exact) <= tr.quad_err[0][k] <= 1e-14 * exact
    assert all(tr.resolved) and tr.method == "gauss-legendre-path"


def test_vertical_edges_carry_the_endpoint_terms():
    # Cauchy's theorem through the engine's own sums: for the odd model ln rho = -3q +
    # q^3/2 on [-2, 2] (peak at q = -sqrt 2, rho(-2) only e^-0.8 below it) Z at mu >= 7
    # is carried by the endpoint terms; a rectangle of height 1 in q (vertical edges and a
    # horizontal line) must give the real-axis value; python-flint's acb.integral on the
    # real axis is the judge.
    from signfree.engine import path_sums
    from signfree.engine.paths import Panel, Path
    L = 2.0
    model = polynomial_model([0.0, -3.0, 0.0, 0.5], L)
    rows = [list(model.coef)]
    mus = [Fraction(7), Fraction(15, 2), Fraction(8)]
    shifts = [0.0]
    axis = Path(0.0, (Panel(-1 + 0j, 1 + 0j, 64),), False)
    box = Path(0.5, (Panel(-1 + 0j, -1 + 0.5j, 48), Panel(-1 + 0.5j, 1 + 0.5j, 64),
                     Panel(1 + 0.5j, 1 + 0j, 48)), False)
    z_axis, _, _ = path_sums.path_sums(rows, model.domain, axis, mus, 192, 1.0, shifts)
    z_box, _, _ = path_sums.path_sums(rows, model.domain, box, mus, 192, 1.0, shifts)
    z0, _, _ = path_sums.path_sums(rows, model.domain, axis, [0], 192, 1.0, shifts)
    with mpmath.workdps(50):
        for k, mu in enumerate(mus):
            ref = flint_rectangle(lambda q: arb(-3) * q + arb(0.5) * q ** 3, float(mu), L, 0.0, 192)
            ref = mpmath.mpc(engine.to_mpf(ref.real), engine.to_mpf(ref.imag))
            for z in (z_axis[0][k], z_box[0][k]):
                with ctx.workprec(192):
                    r = z / z0[0][0]
                got = mpmath.mpc(engine.to_mpf(r.real), engine.to_mpf(r.imag))
                assert abs(got - ref) <= 1e-25 * abs(ref)


def test_quartic_density_saddles_off_the_gaussian_estimate():
    # ln rho = -q^4/4: the saddles p'(q) = -i mu sit at mu^(1/3) e^(i pi/6) and its mirror
    # (mpmath.findroot), far below the Gaussian estimate mu <q^2>; Z decays like
    # exp(-c mu^(4/3)) and oscillates (two saddles interfere). Judge: python-flint's
    # acb.integral along the test's own rectangle through Im q*.
    L = 16.0
    model = ChebyshevModel(coef=C.poly2cheb([0, 0, 0, 0, -0.25 * L ** 4]), domain=(-L, L),
                           parity="even")
    mus = [Fraction(k) for k in range(0, 201, 10)]
    tr = engine.transform([model], mus, digits=12)
    assert all(tr.resolved) and tr.method == "gauss-legendre-path"
    assert tr.nodes < 1500 and tr.prec < 400
    with mpmath.workdps(40):
        for k in (12, 16, 20):
            mu = float(mus[k])
            star = mpmath.findroot(lambda q: -q ** 3 + 1j * mu, mu ** (1 / 3) * mpmath.expjpi(1 / 6))
            assert abs(star.real) > 1 and 0.5 * star.imag < tr.heights[k] < 1.5 * star.imag
            ref = flint_rectangle(lambda q: -q ** 4 / 4, mu, L, float(star.imag), 192)
            ref = engine.to_mpf(ref.real)
            got = value(tr, k)
            assert abs(got - ref) <= tr.quad_err[0][k] + 1e-20 * abs(ref)
            assert abs(got - ref) <= 1e-12 * abs(ref)
        assert -mpmath.log10(abs(ref)) > 150


def test_zeros_of_a_double_peaked_density_against_mpmath():
    # ln rho = q^2 - q^4/100 on [-24, 24]: two peaks at +-7.07, Z(mu) ~ cos(7.07 mu)
    # exp(-mu^2/8) with real zeros; the variance (~50) would suggest ~900 cancelled
    # orders at mu = 9 where the real axis cancels over a few only. Judge of the zeros:
    # mpmath.findroot on mpmath.quad of the same Chebyshev series.
    from signfree.analysis.zeros import find_zeros
    from signfree.engine.complex_mu import Evaluator
    L = 24.0
    model = polynomial_model([0, 0, 1.0, 0, -0.01], L)
    box = (Fraction(8), Fraction(9), Fraction(-1, 5), Fraction(1, 5))
    assert Evaluator(model, box, 12).prec < 400
    res = find_zeros(model, box, digits=12)
    zeros = res.zeros if hasattr(res, "zeros") else res
    assert len(zeros) == 3
    coef = [mpmath.mpf(float(c)) for c in model.coef]

    def p(q):
        x = q / L
        b1 = b2 = 0
        for c in reversed(coef[1:]):
            b1, b2 = 2 * x * b1 - b2 + c, b1
        return x * b1 - b2 + coef[0]
    with mpmath.workdps(30):
        z = zeros[1]
        Z = lambda mu: mpmath.quad(lambda q: mpmath.exp(p(q) + 1j * mu * q),
                                   mpmath.linspace(-L, L, 49))
        ref = mpmath.findroot(Z, mpmath.mpc(z.re, z.im))
        assert abs(mpmath.mpc(z.re, z.im) - ref) <= z.err + 1e-25
        assert abs(ref.imag) < 1e-20 and 8 < ref.real < 9
