"""Two-phase densities: detection, the rational and two-component models,
the automatic choice, and the promise of an ok row, against exact phase
factors: mixtures of two Gaussians (Gradshteyn & Ryzhik 3.896.4 per
component; exact_cases.mixture) with valleys from e^-5 to e^-100, and the
double well exp(V (a x^2 - x^4)) with references from python-flint's
acb.integral (twophase_cases.double_well). A row misses when the exact value
lies outside 1.06 (quad + model + edge + 3 stat) plus half a unit of its last
printed digit (exact_cases.violations)."""
from fractions import Fraction

import mpmath
import numpy as np
import pytest

import exact_cases as X
import twophase_cases as T
from signfree.analysis.analyse import analyse
from signfree.analysis.model_choice import runs_z
from signfree.models.rational import fit_rational
from signfree.models.twophase import find_valley, fit_two_component


def scan(top, n=25):
    return [Fraction(top) * k / (n - 1) for k in range(n)]


# ------------------------------------------------------------- detection

def test_the_valley_between_two_peaks_is_found_and_measured():
    # two Gaussians at -+c, sigma = 1: ln rho(0) - ln rho(c) = -c^2/2 + ln 2
    # + ln(1 + e^(-2 c^2))^-1 (the mixture's closed form), so the valley is
    # 20.4 nats deep for c = 6.5; a single Gaussian has none
    case = T.valley(6.5)
    d = X.log_density_data(case, X.grid(case, 14.5, 161), 1e-3, seed=1)
    v = find_valley(d)
    exact = 6.5 ** 2 / 2 - np.log(2)
    assert v["significant"] and abs(v["depth_nats"] - exact) < 0.1
    assert abs(v["peaks"][0] + 6.5) < 0.2 and abs(v["peaks"][1] - 6.5) < 0.2
    g = X.gaussian(2.0)
    single = find_valley(X.log_density_data(g, X.grid(g, 10, 161), 1e-3, seed=1))
    assert single is None or not single["significant"]


def test_runs_statistic_against_its_normal_approximation():
    # Wald & Wolfowitz (1940): for n1 = n2 = n/2 random signs the number of
    # runs has mean n/2 + 1 and variance n (n - 2) / (4 (n - 1)); alternating
    # signs give the largest z, one sign change the smallest
    n = 100
    alternating = np.array([1.0, -1.0] * (n // 2))
    z_alt = (n - (n / 2 + 1)) / np.sqrt(n * (n - 2) / (4 * (n - 1)))
    assert runs_z(alternating) == pytest.approx(z_alt, rel=1e-12)
    halves = np.concatenate([np.ones(n // 2), -np.ones(n // 2)])
    z_two = (2 - (n / 2 + 1)) / np.sqrt(n * (n - 2) / (4 * (n - 1)))
    assert runs_z(halves) == pytest.approx(z_two, rel=1e-12)
    rng = np.random.default_rng(0)
    zs = [runs_z(rng.standard_normal(400)) for _ in range(200)]
    assert abs(np.mean(zs)) < 0.3 and 0.8 < np.std(zs) < 1.2


# ------------------------------------------------------------------ models

def test_two_components_recover_the_gaussians_of_a_mixture():
    # the two-component model of two Gaussians is exact at degrees 2 + 2:
    # its components' means, widths and weights match the mixture's
    # (0.7 at -5 with sigma 1.2, 0.3 at 6 with sigma 0.9) within the noise
    case = X.mixture([(0.7, -5.0, 1.2), (0.3, 6.0, 0.9)])
    d = X.slopes_data(case, -11.0, 12.0, 0.25, 1e-2, replicas=6, seed=3)
    fit = fit_two_component(d)
    assert fit.consistent and fit.model.degree == "2+2"
    q = np.linspace(-11, 12, 20001)
    for comp, (w, c, s) in zip(fit.model.components, [(0.7, -5.0, 1.2), (0.3, 6.0, 0.9)]):
        rho = np.exp(comp.log_density(q))
        mean = np.sum(q * rho) / np.sum(rho)
        sd = np.sqrt(np.sum((q - mean) ** 2 * rho) / np.sum(rho))
        assert abs(mean - c) < 0.02 and abs(sd - s) < 0.02
    r1, r2 = (np.exp(cm.log_density(q)).sum() for cm in fit.model.components)
    assert abs(r1 / (r1 + r2) - 0.7) < 0.01


def test_rational_model_finds_the_pole_nearest_the_axis():
    # ln rho = -(q^2 + c^2)/2 + ln(2 cosh(c q)): the slope has its first
    # poles at +-i pi / (2 c) with residue 1 (zeros of cosh, A&S 4.5.16);
    # the fit's nearest pole lies close to it
    c = 3.5
    case = T.valley(c)
    d = X.log_density_data(case, X.grid(case, 9.5, 161), 1e-4, seed=2)
    fit = fit_rational(d)
    assert fit.consistent
    nearest = min(fit.model.poles, key=lambda z: abs(z.imag))
    assert abs(nearest - 1j * np.pi / (2 * c)) < 0.05
    q = np.linspace(-9, 9, 37)
    lr = fit.model.log_density(q) - case.log_rho(q)
    assert np.ptp(lr) < 1e-3


# ----------------------------------------------- the promise of an ok row

@pytest.mark.parametrize("c", [3.5, 6.5, 10.0, 14.2])
def test_valleys_from_e5_to_e100_come_out_ok_and_right(c):
    # valleys of 5, 20, 49 and 100 nats; the scan runs through the first
    # zeros of Z = exp(-mu^2/2) cos(c mu) (at mu = pi / (2 c), ...). The
    # Chebyshev series resolves no row (misfit or unresolved); the automatic
    # choice resolves almost all, and every ok row holds the exact value.
    case = T.valley(c)
    mus = scan(2.0)
    d = X.log_density_data(case, X.grid(case, c + 6, 161), 1e-3, seed=1)
    assert abs(T.valley_depth(case, X.grid(case, c + 6, 161)) - (c * c / 2 - np.log(2))) < 0.5
    cheb = analyse(d, mus, digits=10, model="chebyshev").table
    assert X.violations(cheb, case) == [] and cheb.status_counts()["ok"] <= 1
    auto = analyse(d, mus, digits=10).table
    assert X.violations(auto, case) == []
    assert auto.status_counts()["ok"] >= 0.9 * len(mus)
    assert auto.info["two_phase"]["detected"]
    assert auto.info["model_choice"]["chosen"] == auto.info["model"]
    assert any("two-phase" in note for note in auto.info["notes"])


@pytest.mark.parametrize("model", ["auto", "rational", "two-component"])
def test_slopes_with_replicas_through_the_first_zeros(model):
    # Robbins-Monro-like slopes with 6 replicas (jackknife refits of the same
    # recipe): valley of 20 nats, scan to mu = 3 (about 2 orders cancelled
    # away from the zeros); no ok row misses, most rows are ok
    case = T.valley(6.5)
    mus = scan(3.0)
    for seed in (1, 2):
        d = X.slopes_data(case, -12.5, 12.5, 0.25, 1e-2, replicas=6, seed=seed)
        t = analyse(d, mus, digits=10, model=model).table
        assert X.violations(t, case) == []
        assert t.status_counts()["ok"] >= 0.8 * len(mus)
        assert "jackknife" in t.info["statistical_errors"]


def test_raw_samples_of_unequal_phases():
    # 2e5 independent samples from 0.7 N(-5, 1.2^2) + 0.3 N(6, 0.9^2) through
    # the samples histogram: the Poisson errors of the bins propagated by the
    # covariance of the fitted parameters
    case = X.mixture([(0.7, -5.0, 1.2), (0.3, 6.0, 0.9)])
    mus = scan(2.5)
    for seed in (0, 1):
        d = T.sampled(case, -11, 11, 200000, seed=seed)
        t = analyse(d, mus, digits=10).table
        assert X.violations(t, case) == []
        assert t.status_counts()["ok"] >= 0.8 * len(mus)
        assert t.info["model"].split(":")[0] in ("two-component", "rational")
        assert "covariance" in t.info["statistical_errors"]


@pytest.mark.parametrize("c", [10.0, 14.2])
def test_samples_of_deep_valleys_never_give_a_wrong_ok(c):
    # 2e5 samples of two Gaussians 2c apart (valleys of 49 and 100 nats): no
    # sample falls in the valley, whose empty bins enter the nonlinear fits
    # as their Poisson deviance; whichever model the data let auto take, no
    # ok row misses the exact value (GR 3.896.4), and most rows are ok
    case = T.valley(c)
    mus = scan(2.0)
    ok = 0
    for seed in (1, 2):
        d = T.sampled(case, -c - 6, c + 6, 200000, seed=seed)
        t = analyse(d, mus, digits=10).table
        assert X.violations(t, case) == []
        assert t.info["two_phase"]["detected"]
        ok += t.status_counts()["ok"]
    assert ok >= 1.5 * len(mus)


def test_double_well_against_certified_references():
    # rho = exp(V (x^2 - x^4)), x = q / V, V = 100: a 25-nat valley between
    # peaks at q = +-70.7. ln rho is a quartic, so the automatic choice keeps
    # the Chebyshev series; forced, the two other models must not give a
    # wrong ok either. References: acb.integral (twophase_cases.double_well).
    dw = T.double_well(100.0)
    mus = scan(0.5)
    d = X.slopes_data(dw, -130, 130, 1.0, 1e-2, replicas=6, seed=1)
    auto = analyse(d, mus, digits=10).table
    assert auto.info["model"] == "chebyshev:4" and auto.info["two_phase"]["detected"]
    assert X.violations(auto, dw) == [] and auto.status_counts()["ok"] >= 12
    for model in ("rational", "two-component"):
        t = analyse(d, mus, digits=10, model=model).table
        assert X.violations(t, dw) == []


def test_double_well_samples_keep_the_polynomial_and_stay_honest():
    # 4e5 samples of the double well, binned as a samples file is: the valley
    # bins are empty, and their Poisson deviance keeps the flexible models
    # from putting weight there (McCullagh & Nelder 1989, 2.3). Where the
    # quartic fits (chi^2 passes) the automatic choice keeps it and every
    # row is ok; for every data set and model, no ok row misses the
    # certified reference (acb.integral).
    dw = T.double_well(100.0)
    mus = scan(0.3)
    for seed in (0, 1, 2):
        d = T.sampled(dw, -125, 125, 400000, seed=seed)
        auto = analyse(d, mus, digits=10).table
        assert X.violations(auto, dw) == []
        if auto.info["model"] == "chebyshev:4":
            assert auto.status_counts()["ok"] == len(mus)
        two = analyse(d, mus, digits=10, model="two-component").table
        assert X.violations(two, dw) == []
    assert auto.info["model"] == "chebyshev:4"


# ------------------------------------------------------ choice and errors

def test_one_phase_data_keep_the_chebyshev_series():
    # a Gaussian: no valley, the Chebyshev fit passes; nothing else is tried
    g = X.gaussian(1.0)
    d = X.log_density_data(g, X.grid(g, 8, 81), 1e-3, seed=0)
    t = analyse(d, scan(3), digits=10).table
    assert t.info["model"] == "chebyshev:2" and not t.info["two_phase"]["detected"]
    assert len(t.info["model_choice"]["candidates"]) == 1


def test_a_pole_pair_density_takes_the_rational_model():
    # rho = 1 / (1 + (q/2)^2): ln rho = -ln|q - 2i|^2 + const, a rational
    # slope with one pole pair of residue -1, which no Chebyshev degree fits
    # to 1e-5; the automatic choice takes the rational model, and rows whose
    # tail beyond +-20 matters (exp(-2 |mu|), the Cauchy characteristic
    # function; common practice) are not ok
    case = X.cauchy(2.0)
    d = X.log_density_data(case, X.grid(case, 20, 81), 1e-5, seed=3)
    t = analyse(d, scan(2, 9), digits=10).table
    assert t.info["model"].startswith("rational:1/")
    assert X.violations(t, case) == []


def test_statistical_errors_cover_the_exact_value():
    # calibrated one-sigma errors: |value - exact| <= stat_err in about 68%
    # of independent data sets (a normal error; common practice), here
    # counted over 24 slope data sets with 6 replicas at mu = 0.3 and 0.8,
    # where the structure bound does not dominate
    case = T.valley(6.5)
    mus = [Fraction(3, 10), Fraction(4, 5)]
    inside = total = 0
    for seed in range(12):
        d = X.slopes_data(case, -12.5, 12.5, 0.25, 1e-2, replicas=6, seed=100 + seed)
        t = analyse(d, mus, digits=10, model="two-component").table
        for r in t.rows:
            exact = case.exact_at(r.mu)
            inside += int(abs(mpmath.mpc(r.value) - exact) <= r.stat_err)
            total += 1
    assert 0.5 <= inside / total <= 0.92


def test_covariance_route_matches_the_scatter_of_repeated_fits():
    # without replicas the errors come from the parameter covariance
    # (central differences along its principal axes); the scatter of the
    # values over 20 independent data sets must agree with them within the
    # sampling uncertainty (common practice)
    case = T.valley(3.5)
    mus = [Fraction(1, 2)]
    values, errors = [], []
    for seed in range(20):
        d = X.log_density_data(case, X.grid(case, 9.5, 121), 2e-2, seed=seed)
        t = analyse(d, mus, digits=10, model="two-component").table
        values.append(complex(t.rows[0].value))
        errors.append(float(t.rows[0].stat_err))
    scatter = np.std(np.real(values), ddof=1)
    assert 0.6 < np.mean(errors) / scatter < 1.6


# ------------------------------------------------------ the command line

def write_slopes(path, density):
    """A slopes file with one row per replica and interval."""
    with open(path, "w") as f:
        f.write("# kind: slopes\n# volume: 10\nreplica,q,width,slope\n")
        for r, rep in enumerate(density.replicas, start=1):
            for q, w, v in zip(density.q, density.width, rep):
                f.write(f"{r},{float(q)!r},{float(w)!r},{float(v)!r}\n")
    return path


def test_command_line_names_two_phase_data_and_the_model_choice(tmp_path, capsys):
    # slopes of two Gaussians at -+6.5 (valley of 20 nats; exact transform
    # exp(-mu^2/2) cos(6.5 mu), GR 3.896.4): the printed report marks the
    # data two-phase and says which model was taken and why; summary.json
    # holds the evidence and the models tried; the degree column names the
    # model's order; compare takes the same model as its reference
    import csv
    import json
    from signfree.cli import main
    case = T.valley(6.5)
    src = write_slopes(tmp_path / "v.csv",
                       X.slopes_data(case, -12.5, 12.5, 0.25, 1e-2, replicas=6, seed=1))
    assert main(["run", str(src), "--mu", "0:1:5", "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert "[two-phase data]" in out and "model choice: two-component:" in out
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["two_phase"]["detected"] and abs(summary["two_phase"]["depth_nats"] - 20.4) < 1
    choice = summary["model_choice"]
    assert choice["chosen"] == summary["model"] and choice["asked"] == "auto"
    assert {c["model"].split(":")[0] for c in choice["candidates"]} == \
        {"chebyshev", "rational", "two-component"}
    with open(tmp_path / "out" / "results.csv") as f:
        rows = list(csv.DictReader(f))
    assert rows[0]["degree"] == summary["model"].split(":")[1]
    for row in rows:
        mu = float(row["mu"])
        exact = np.exp(-mu * mu / 2) * np.cos(6.5 * mu)
        assert row["status"] == "ok" and abs(float(row["avg_phase"]) - exact) < 0.01
    # a degree is a Chebyshev degree: refused for the other models
    assert main(["run", str(src), "--mu", "0:1:5", "--model", "rational", "--degree", "4",
                 "--out", str(tmp_path / "bad")]) == 2
    assert "applies only to the Chebyshev model" in capsys.readouterr().err
    assert not (tmp_path / "bad").exists()
    from signfree.analysis.compare import compare
    from signfree.io.reading import read_density
    res = compare(read_density(str(src)), [Fraction(1, 5)], digits=10)
    assert res.reference == summary["model"]
    assert any(label.startswith("rational:") for label in res.routes)
