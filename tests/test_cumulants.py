"""Cumulants (samples, histograms, smoothed models), the blocking errors of
correlated series, the samples reader and the cumulant-series model, against
closed forms, scipy and mpmath."""
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from numpy.polynomial import chebyshev as C
from scipy import stats

from signfree import engine
from signfree.models.chebyshev import ChebyshevModel
from signfree.analysis.cumulant import cumulant_rows
from signfree.analysis.results import Row
from signfree.engine.moments import model_cumulants
from signfree.models.cumulant import (CumulantModel, histogram_cumulant_errors,
                                      histogram_cumulants, moments_to_cumulants,
                                      sample_cumulants)
from signfree.density import Density
from signfree.errors import InputError
from signfree.models.piecewise import PiecewiseModel
from signfree.io.samples import (Samples, binned_error, blocking_analysis, read_any,
                                 read_samples, samples_to_histogram)
from signfree.scenarios import rotor_log_density

# ------------------------------------------------------------ fixtures

V_ROT, B_ROT = 41, 0.5
N_CHEB = 48                       # Chebyshev points of the rotor model
L_ROT = 0.8 * V_ROT


@pytest.fixture(scope="module")
def rotor_model():
    """ln rho of V = 41 independent rotors (b = 0.5), exact to ~1e-15
    (signfree.scenarios, 15 digits), interpolated at 48 Chebyshev points on
    [-0.8 V, 0.8 V]. rho is even (exp(b cos t) is invariant under t -> -t,
    which flips q), so only the 24 points q > 0 are evaluated and the odd
    coefficients are zero. Beyond +-0.8 V, rho / rho(0) < 1e-13."""
    x = np.cos(np.pi * (np.arange(N_CHEB) + 0.5) / N_CHEB)
    x[N_CHEB // 2:] = -x[: N_CHEB // 2][::-1]
    half = [float(rotor_log_density(xi * L_ROT, B_ROT, V_ROT, dps=15)[0])
            for xi in x[: N_CHEB // 2]]
    coef = C.chebfit(x, np.array(half + half[::-1]), N_CHEB - 1)
    coef[1::2] = 0.0
    return ChebyshevModel(coef=coef, domain=(-L_ROT, L_ROT), parity="even")


def gaussian_model(sigma, half_range):
    """ln rho = -q^2 / (2 sigma^2) on [-L, L] as an exact Chebyshev series
    (x^2 = (T_0 + T_2) / 2 with q = L x)."""
    c = -(half_range ** 2) / (4 * sigma ** 2)
    return ChebyshevModel(coef=np.array([c, 0.0, c]), domain=(-half_range, half_range),
                          parity="even")


def ar1(n, phi, seed):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0] / math.sqrt(1 - phi ** 2)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + e[t]
    return x


def value(tr, k, row=0):
    z = tr.values[row][k]
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


# ------------------------------------------------------------ sample cumulants

# scipy.stats.kstat: Fisher's unbiased k-statistics, the reference
@pytest.mark.parametrize("seed, shape", [(1, "gamma"), (2, "normal"), (3, "skewed")])
def test_k_statistics_match_scipy(seed, shape):
    rng = np.random.default_rng(seed)
    x = {"gamma": rng.gamma(3.0, size=3000), "normal": 5 + 2 * rng.standard_normal(1000),
         "skewed": rng.exponential(size=400) ** 2}[shape]
    sc = sample_cumulants(x, 4)
    for n in range(1, 5):
        assert float(sc.kappa[n - 1]) == pytest.approx(stats.kstat(x, n), rel=1e-10)
    assert all(e > 0 for e in sc.kappa_err)


# common practice: the cumulants of an empirical distribution from its
# central moments (Kendall & Stuart vol. 1, 3.14); mpmath as the reference
def test_orders_above_four_are_plain_cumulants_of_the_empirical_distribution():
    rng = np.random.default_rng(4)
    x = rng.gamma(2.0, size=500)
    sc = sample_cumulants(x, 6)
    with mpmath.workdps(50):
        xs = [mpmath.mpf(float(v)) for v in x]
        mean = mpmath.fsum(xs) / len(xs)
        m = [mpmath.fsum((v - mean) ** r for v in xs) / len(xs) for r in range(7)]
        k5 = m[5] - 10 * m[3] * m[2]
        k6 = m[6] - 15 * m[4] * m[2] - 10 * m[3] ** 2 + 30 * m[2] ** 3
    assert sc.kappa[4] == pytest.approx(k5, rel=1e-12)
    assert sc.kappa[5] == pytest.approx(k6, rel=1e-12)


# Kendall & Stuart vol. 1, 3.14: moments of the Poisson distribution with
# mean lam give kappa_n = lam for every n
def test_moment_cumulant_recursion_on_poisson_moments():
    lam = mpmath.mpf(3)
    with mpmath.workdps(40):
        # raw moments of Poisson(lam): Touchard polynomials sum S(n,k) lam^k
        m = [mpmath.fsum(mpmath.stirling2(n, k) * lam ** k for k in range(n + 1))
             for n in range(9)]
        kappa = moments_to_cumulants(m)
    assert all(abs(k - lam) < mpmath.mpf(10) ** -30 for k in kappa)


# common practice: for AR(1), x_t = phi x_{t-1} + e_t, the integrated
# autocorrelation time is tau_int = (1 + phi) / (2 (1 - phi)) = 4.5 at phi = 0.8
def test_blocking_recovers_the_ar1_autocorrelation_time():
    x = ar1(2 ** 17, 0.8, seed=7)
    err, tau, n_eff = binned_error(x)
    naive = x.std() / math.sqrt(len(x) - 1)
    assert tau == pytest.approx(4.5, rel=0.25)
    assert err / naive == pytest.approx(math.sqrt(2 * 4.5), rel=0.15)
    assert n_eff == pytest.approx(len(x) / (2 * tau))
    b = blocking_analysis(x)
    assert b.plateau and b.block_size >= 32
    # uncorrelated data: tau about 1/2 and the error the naive one
    err_iid, tau_iid, _ = binned_error(np.random.default_rng(8).standard_normal(2 ** 14))
    assert tau_iid == pytest.approx(0.5, rel=0.3)


# common practice: for AR(1) Gaussian data the series x^2 has correlation
# phi^(2t), so var of k_2 grows by 2 tau(x^2) = (1 + phi^2)/(1 - phi^2) ~ 4.6
def test_jackknife_errors_grow_with_the_autocorrelation():
    x = ar1(2 ** 16, 0.8, seed=9)
    shuffled = np.random.default_rng(10).permutation(x)
    corr, iid = sample_cumulants(x, 4), sample_cumulants(shuffled, 4)
    assert corr.kappa_err[0] / iid.kappa_err[0] == pytest.approx(3.0, rel=0.25)
    assert corr.kappa_err[1] / iid.kappa_err[1] == pytest.approx(math.sqrt(4.56), rel=0.3)
    assert corr.block_size > iid.block_size
    assert corr.n_eff < 0.2 * len(x)


# standard error of the mean: the jackknife error of kappa_1 of independent
# data is the naive sigma / sqrt(N) (common practice)
def test_weighted_cumulants_and_replicas():
    rng = np.random.default_rng(12)
    x = rng.standard_normal(4000)
    w = rng.uniform(0.5, 1.5, size=4000)
    sc = sample_cumulants(x, 3, weights=w)
    assert float(sc.kappa[0]) == pytest.approx(np.average(x, weights=w), rel=1e-12)
    var = np.average((x - np.average(x, weights=w)) ** 2, weights=w)
    assert float(sc.kappa[1]) == pytest.approx(var, rel=1e-12)
    reps = np.repeat([1, 2, 3, 4], 1000)
    sr = sample_cumulants(x, 2, replicas=reps)
    assert sr.kappa_err[0] == pytest.approx(x.std() / math.sqrt(len(x)), rel=0.25)


# ------------------------------------------------------------ histograms

# DLMF 10.35.1: P(Q) = exp(-lam) I_Q(lam) (Skellam) has
# Z(theta)/Z(0) = exp(lam (cos theta - 1)), so kappa_2k = lam and odd ones 0
def test_histogram_cumulants_of_the_skellam_distribution():
    lam = 2.5
    Q = np.arange(-30, 31)
    p = np.array([float(mpmath.exp(-lam) * mpmath.besseli(int(k), lam)) for k in Q])
    d = Density(kind="histogram", q=Q.astype(float), value=p * 1e6, width=np.ones(len(Q)),
                error_source="poisson", metadata={"binning": "lattice"})
    k = histogram_cumulants(d, 8)
    for n in (2, 4, 6, 8):
        assert float(k[n - 1]) == pytest.approx(lam, rel=1e-9)
    for n in (1, 3, 5, 7):
        assert abs(float(k[n - 1])) < 1e-9
    errs = histogram_cumulant_errors(d, 4)
    # Poisson counts, delta method: var(mean) = sum c_i (q_i - m)^2 / N^2 = var / N
    assert errs[0] == pytest.approx(math.sqrt(lam / 1e6), rel=1e-6)


# Sheppard (1898), Kendall & Stuart vol. 1, 3.18: grouping into bins of width
# h adds B_n h^n / n to kappa_n; for a smooth density the corrected values
# are exact up to terms of order exp(-2 pi^2 sigma^2 / h^2) (here e^-79)
def test_sheppard_corrections_for_a_binned_gaussian():
    h = 0.5
    edges = np.arange(-12.0, 12.0 + h / 2, h)
    p = np.diff([float(mpmath.ncdf(e)) for e in edges])
    d = Density(kind="histogram", q=0.5 * (edges[1:] + edges[:-1]), value=p * 1e9,
                width=np.full(len(p), h), error_source="poisson",
                metadata={"binning": "continuous"})
    raw = histogram_cumulants(d, 4, sheppard=False)
    fixed = histogram_cumulants(d, 4)
    assert float(raw[1]) == pytest.approx(1 + h ** 2 / 12, rel=1e-6)
    assert float(fixed[1]) == pytest.approx(1.0, rel=1e-9)
    assert abs(float(fixed[3])) < 1e-9


# ------------------------------------------------------------ models

# Gradshteyn & Ryzhik 3.896.4: a Gaussian density has Z(mu)/Z(0) =
# exp(-sigma^2 mu^2 / 2) exactly: kappa_2 = sigma^2 is its only cumulant, and
# the order-2 cumulant model reproduces it (+-40 sigma of range: edges e^-800)
def test_gaussian_model_has_only_kappa2_and_the_order2_series_is_exact():
    sigma = 1.5
    model = gaussian_model(sigma, 40 * sigma)
    kappa = model_cumulants(model, 8, digits=30)
    assert abs(kappa[1] - sigma ** 2) < mpmath.mpf(10) ** -28
    for n in (1, 3, 4, 5, 6, 7, 8):
        assert abs(kappa[n - 1]) < mpmath.mpf(10) ** -28 * sigma ** n
    cm = CumulantModel(kappa=tuple(kappa), order=2, parity="even")
    mus = [Fraction(1, 2), Fraction(3), Fraction(10)]
    tr = engine.transform([cm], mus, digits=15)
    ref = engine.transform([model], mus, digits=15)
    assert tr.method == "cumulant-series" and tr.nodes == 0 and all(tr.resolved)
    with mpmath.workdps(60):
        for k, mu in enumerate(mus):
            exact = mpmath.exp(-(mpmath.mpf(mu.numerator) / mu.denominator) ** 2 * sigma ** 2 / 2)
            assert abs(value(tr, k) - exact) <= mpmath.mpf(10) ** -15 * exact
            assert abs(value(tr, k) - value(ref, k)) <= 1e-13 * exact
            assert tr.quad_err[0][k] < 1e-15 * exact
    assert cm.label == "cumulant:2" and cm.degree is None and cm.edge_free
    nxt = cm.next_order_model()
    assert nxt.order == 4                        # odd orders of an even density skipped


# DLMF 10.32.1: the charge q = sum sin(t) of V rotors has the moment
# generating function M(t) = (I0(sqrt(b^2 + t^2)) / I0(b))^V, so its
# cumulants are n! times the Taylor coefficients of V ln I0(sqrt(b^2 + t^2))
# - V ln I0(b) (mpmath.taylor is the reference). The model stops at +-L:
# the moments it lacks are about Int_L^inf q^n rho ~ L^n rho(L) / |p'(L)|
# (integration by parts, common practice), which sets the tolerance.
def test_model_cumulants_of_independent_rotors(rotor_model):
    kappa = model_cumulants(rotor_model, 8, digits=20)
    b = mpmath.mpf(B_ROT)
    with mpmath.workdps(30):
        taylor = mpmath.taylor(lambda t: V_ROT * mpmath.log(mpmath.besseli(0, mpmath.sqrt(
            b * b + t * t))) - V_ROT * mpmath.log(mpmath.besseli(0, b)), 0, 8)
        z0 = mpmath.quad(lambda q: mpmath.exp(float(rotor_model.log_density(float(q)))),
                         [-L_ROT, 0, L_ROT])
    tail = 2 * math.exp(float(rotor_model.log_density(L_ROT))) / float(z0) \
        / abs(float(rotor_model.derivative(L_ROT)))
    for n in range(1, 9):
        exact = taylor[n] * mpmath.factorial(n)
        tol = 3 * L_ROT ** n * tail + 1e-12 * abs(exact)
        assert abs(kappa[n - 1] - exact) <= tol, (n, kappa[n - 1], exact, tol)
    assert float(kappa[1]) == pytest.approx(float(taylor[2] * 2), rel=1e-12)


# common practice: a piecewise-linear ln rho through exact Gaussian values
# has kappa_2 = sigma^2 (1 + O(h^2)); the per-segment Gauss-Legendre moments
# must agree with mpmath.quad of the same piecewise function
def test_piecewise_model_cumulants_match_mpmath_quad():
    q = np.linspace(-10, 10, 81)
    model = PiecewiseModel(knots=q, values=-q ** 2 / 2 + 0.1 * q)
    kappa = model_cumulants(model, 4, digits=20)
    with mpmath.workdps(30):
        t = [mpmath.mpf(float(v)) for v in q]
        v = [mpmath.mpf(float(y)) for y in model.values]

        def moment(r):
            return mpmath.fsum(mpmath.quad(
                lambda x: x ** r * mpmath.exp(v[j] + (v[j + 1] - v[j]) * (x - t[j])
                                              / (t[j + 1] - t[j])), [t[j], t[j + 1]])
                for j in range(len(q) - 1))

        m0 = moment(0)
        ref = moments_to_cumulants([moment(r) / m0 for r in range(5)])
    for n in range(1, 5):
        assert abs(kappa[n - 1] - ref[n - 1]) < mpmath.mpf(10) ** -18 * max(1, abs(ref[n - 1]))
    assert float(kappa[1]) == pytest.approx(1.0, rel=0.01)


# the cumulant-series model: model error from the next order, statistical
# error propagated from kappa_err, and 'beyond_radius' past the radius
# (common practice: the series diverges past the nearest zero of Z)
def test_cumulant_rows_statuses():
    kappa = (0.0, 2.0, 0.0, -0.3, 0.0, 0.05)
    cm = CumulantModel(kappa=kappa, order=2, kappa_err=(0.01, 0.02, 0.01, 0.05, 0.01, 0.02),
                       parity="even")
    nxt = cm.next_order_model()
    assert nxt.order == 4
    mus = [Fraction(1, 10), Fraction(1, 2), Fraction(2), Fraction(3)]
    rows = cumulant_rows(cm, mus, next_model=nxt, radius=2.5, digits=12)
    assert [r.status for r in rows][-1] == "beyond_radius"
    assert rows[-1].avg_phase == "" and rows[-1].cancel_orders is None
    assert rows[0].status == "ok"
    z = mpmath.exp(-2 * mpmath.mpf("0.01") / 2)
    assert abs(rows[0].value - z) < 1e-15
    # without a full transform to compare with: |Z_2 - Z_4|
    assert rows[0].model_err == pytest.approx(
        float(abs(z * (mpmath.exp(-0.3 * 1e-4 / 24) - 1))), rel=1e-6)
    # with one, the difference from it plus its own total error
    ref = [Row(mu=m, value=r.value * (1 + mpmath.mpf("1e-3")), quad_err=mpmath.mpf(0),
               edge_err=mpmath.mpf("1e-5")) for m, r in zip(mus, rows)]
    against = cumulant_rows(cm, mus, reference=ref, digits=12)
    for a, r in zip(against, ref):
        assert a.model_err == pytest.approx(float(abs(a.value) * 1e-3 + 1e-5), rel=1e-9)
    # stat_err = |Z| err_2 mu^2 / 2 (odd orders are zero by parity)
    assert rows[1].stat_err == pytest.approx(float(abs(rows[1].value)) * 0.02 * 0.25 / 2, rel=1e-9)
    # a kappa within two errors of zero is skipped by next_order_model
    flat = CumulantModel(kappa=(0.0, 1.0, 0.0, 0.01, 0.0, 0.5), order=2,
                         kappa_err=(0.1, 0.1, 0.1, 0.1, 0.1, 0.1), parity="even")
    assert flat.next_order_model().order == 6
    assert CumulantModel(kappa=(0.0, 1.0), order=2).next_order_model() is None


# ------------------------------------------------------------ samples files

def write(tmp_path, lines, name="s.csv"):
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n")
    return path


def test_read_samples_with_weights_replicas_and_metadata(tmp_path):
    path = write(tmp_path, ["# kind: samples", "# volume: 12", "q,weight,replica",
                            "1,0.5,1", "-2,1.5,1", "0,1,2", "3,2,2", "1,1,2"])
    s = read_samples(path)
    np.testing.assert_array_equal(s.q, [1, -2, 0, 3, 1])
    np.testing.assert_array_equal(s.weights, [0.5, 1.5, 1, 2, 1])
    np.testing.assert_array_equal(s.replicas, [1, 1, 2, 2, 2])
    assert s.volume == 12 and s.kind == "samples" and s.metadata["kind"] == "samples"
    assert isinstance(read_any(path), Samples)
    plain = write(tmp_path, ["q", "1", "2", "3", "4"], "plain.csv")
    assert isinstance(read_any(plain), Samples)          # header of q only
    dens = write(tmp_path, ["q,log_density", "0,1", "1,2", "2,3"], "d.csv")
    assert read_any(dens).kind == "log_density"


BAD = {
    "text": (["q", "1", "2", "x", "4"], ":4:1:", "not a number"),
    "nan": (["q,weight", "1,1", "2,1", "nan,1", "3,1"], ":4:1:", "finite"),
    "inf_weight": (["q,weight", "1,1", "2,inf", "3,1", "4,1"], ":3:2:", "finite"),
    "weight": (["q,weight", "1,1", "2,0", "3,1", "4,1"], ":3:2:", "> 0"),
    "negative_weight": (["q,weight", "1,1", "2,1", "3,-1", "4,1"], ":4:2:", "> 0"),
    "replica": (["replica,q", "1,1", "a,2", "1,3", "1,4"], ":3:1:", "integer"),
    "missing_q": (["# kind: samples", "x,weight", "1,1", "2,1"], ":2:", "'q'"),
    "empty": ([""], ":", "empty"),
    "no_rows": (["# kind: samples", "q,weight"], ":", "no data rows"),
    "fields": (["q,weight", "1,1", "2", "3,1", "4,1"], ":3:", "fields"),
    "few": (["q", "1", "2"], ":", "at least 4"),
    "kind": (["# kind: slopes", "q", "1", "2", "3", "4"], ":1:", "samples"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_samples_files_are_located(tmp_path, case):
    lines, where, word = BAD[case]
    path = write(tmp_path, lines)
    with pytest.raises(InputError) as info:
        read_samples(path)
    text = str(info.value)
    assert text.startswith(f"{path}{where} "), text
    assert word in text


# common practice: integer charges in unit bins centred on the integers,
# other charges in Freedman-Diaconis bins (width 2 IQR n^(-1/3))
def test_samples_to_histogram_bins():
    rng = np.random.default_rng(5)
    k = rng.integers(-5, 6, size=2000).astype(float)
    d = samples_to_histogram(Samples(q=k))
    assert d.kind == "histogram" and d.metadata["binning"] == "lattice"
    np.testing.assert_array_equal(d.q, np.arange(-5.0, 6.0))
    np.testing.assert_array_equal(d.width, np.ones(11))
    assert d.value.sum() == 2000
    x = rng.standard_normal(8000)
    h = samples_to_histogram(Samples(q=x))
    iqr = np.subtract(*np.percentile(x, [75, 25]))
    assert h.width[0] == pytest.approx(2 * iqr * 8000 ** (-1 / 3), rel=0.05)
    assert h.metadata["binning"] == "continuous"
    # weights: the total is Kish's effective size (sum w)^2 / sum w^2
    w = rng.uniform(0.5, 2, size=8000)
    hw = samples_to_histogram(Samples(q=x, weights=w))
    assert hw.value.sum() == pytest.approx(w.sum() ** 2 / (w ** 2).sum())
    # the histogram of integer samples reproduces their plain cumulants
    hk = histogram_cumulants(d, 2)
    assert float(hk[1]) == pytest.approx(np.var(k), rel=1e-12)


# common practice: a correlated series carries N / (2 tau_int) independent
# samples' worth of information, so the histogram for the smoothings is
# scaled to that size (tau_int = 4.5 for AR(1) with phi = 0.8, as above)
def test_histogram_of_correlated_samples_is_scaled_to_the_effective_size():
    from signfree.io.samples import density_from_samples
    x = np.rint(3 * ar1(2 ** 15, 0.8, seed=21))
    d, notes = density_from_samples(Samples(q=x))
    assert d.value.sum() == pytest.approx(len(x) / 9, rel=0.3)
    assert notes and "correlated" in notes[0]
    iid = np.random.default_rng(22).permutation(x)
    d2, notes2 = density_from_samples(Samples(q=iid))
    assert d2.value.sum() == len(x) and notes2 == []
