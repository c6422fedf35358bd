"""The imaginary-mu check and the observables on the command line.

Gaussian ln rho = -q^2 / (2 s^2) (exact interval-average slopes): at
mu = i nu, Z(i nu)/Z(0) = exp(nu^2 s^2 / 2) and n = <q>/V = -nu s^2 / V
(Gradshteyn & Ryzhik 3.896.4 continued to imaginary mu; the weight
rho e^{-nu q} is a normal distribution of mean -nu s^2).
"""
import csv
import json

import mpmath
import numpy as np
import pytest
from scipy import stats

from signfree.analysis.analyse import analyse
from signfree.analysis.settings import parse_mu_spec
from signfree.io.references import read_imaginary_reference

from test_cli import gaussian_slopes, read_results, signfree

S2, V = 9.0, 20.0
NUS = [k / 10 for k in range(11)]


def reference(path, shift=0.0, err=0.01, seed=11):
    z = np.random.default_rng(seed).standard_normal(len(NUS))
    with open(path, "w") as f:
        f.write("# quantity: n\nnu,value,error\n")
        for nu, zk in zip(NUS, z):
            f.write(f"{nu},{float(-nu * S2 / V + shift + err * zk)!r},{err}\n")
    return z


def test_chi2_of_the_agreement_against_scipy(tmp_path):
    src = gaussian_slopes(tmp_path / "g.csv", half_range=90.0)
    z = reference(tmp_path / "ref.csv")
    from signfree.io.reading import read_density
    res = analyse(read_density(src), parse_mu_spec("0"),
                  imaginary_reference=read_imaginary_reference(tmp_path / "ref.csv"))
    check = res.observables.check
    # the prediction's own errors (1e-13 slopes) are negligible beside the
    # reference's 0.01: chi^2 is the sum of the drawn normal deviates squared,
    # and p its chi^2 survival function (scipy.stats.chi2)
    assert check.dof == len(NUS)
    assert check.chi2 == pytest.approx(float(z @ z), rel=1e-6)
    assert check.p_value == pytest.approx(stats.chi2.sf(check.chi2, len(NUS)), rel=1e-6)
    for v, nu in zip(check.values, NUS):
        assert v.status == "ok"
        assert abs(v.value - (-nu * S2 / V)) <= v.total_err + 1e-12
    # pull = (prediction - reference) / its standard error
    assert check.pulls == pytest.approx(list(-z), rel=1e-6)


def test_run_with_observables_imaginary_mu_and_reference(tmp_path):
    src = gaussian_slopes(tmp_path / "g.csv", half_range=90.0)
    reference(tmp_path / "ref.csv", shift=0.05)     # 5 standard errors off
    res = signfree("run", src, "--mu", "0:2:5,0.5i,0.3+0.2i", "--observables", "n,chi,q^2",
                   "--imaginary-reference", "ref.csv", "--out", "out", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    rows = read_results(tmp_path / "out")
    assert [r["mu"] for r in rows] == ["0", "0.5", "1", "1.5", "2", "0.5i", "0.3+0.2i"]
    for r in rows:
        assert r["n_status"] == "ok" and r["chi_status"] == "ok" and r["<q^2>_status"] == "ok"
        assert float(r["chi"]) == pytest.approx(S2 / V, rel=1e-9)   # s^2 / V at every mu
    for r in rows[:5]:
        mu = float(r["mu"])
        # Gradshteyn & Ryzhik 3.896.4: <q>_mu = i mu s^2, <q^2>_mu = s^2 - mu^2 s^4
        assert r["n"] == "0" and float(r["n_imag"]) == pytest.approx(mu * S2 / V, rel=1e-9,
                                                                     abs=1e-12)
        assert float(r["<q^2>"]) == pytest.approx(S2 - mu * mu * S2 * S2, rel=1e-9)
    im = rows[5]
    assert float(im["avg_phase"]) == pytest.approx(float(mpmath.exp(0.25 * S2 / 2)), rel=1e-10)
    assert float(im["delta_f"]) == pytest.approx(-0.25 * S2 / 2 / V, rel=1e-9)
    assert float(im["n"]) == pytest.approx(-0.5 * S2 / V, rel=1e-9) and im["n_imag"] == "0"
    assert im["naive_samples"] == ""
    # mu = 0.3 + 0.2i: n = i mu s^2 / V = (-0.2 + 0.3 i) s^2 / V
    cx = rows[6]
    assert float(cx["n"]) == pytest.approx(-0.2 * S2 / V, rel=1e-9)
    assert float(cx["n_imag"]) == pytest.approx(0.3 * S2 / V, rel=1e-9)
    with open(tmp_path / "out" / "imaginary_check.csv") as f:
        check = list(csv.DictReader(f))
    assert len(check) == len(NUS)
    assert all(float(r["pull"]) < -2 for r in check)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    ic = summary["observables"]["imaginary_check"]
    assert ic["dof"] == len(NUS) and ic["p_value"] < 1e-6
    assert "imaginary-mu check" in res.stdout and "observables" in res.stdout


def test_report_draws_the_charge_density(tmp_path):
    src = gaussian_slopes(tmp_path / "g.csv", half_range=90.0)
    reference(tmp_path / "ref.csv")
    res = signfree("report", src, "--mu", "0:2:9", "--observables", "n,chi",
                   "--imaginary-reference", "ref.csv", "--out", "rep", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    out = tmp_path / "rep"
    for name in ("fig_charge.png", "fig_charge.pdf", "fig_imaginary.png", "report.html",
                 "imaginary_check.csv"):
        assert (out / name).exists(), name
    page = (out / "report.html").read_text()
    assert 'id="observables"' in page and 'id="fig-charge"' in page
    assert "10 figure files" in res.stdout   # fit, phase, depth, charge, imaginary


@pytest.mark.parametrize("args, message", [
    (["--mu", "1", "--observables", "q^x"], "--observables"),
    (["--mu", "1", "--observables", "n", "--model", "piecewise"], "Chebyshev"),
    (["--mu", "0.5i", "--model", "cumulant"], "Chebyshev"),
    (["--mu", "1", "--imaginary-reference", "missing.csv"], "missing.csv: file not found"),
    (["--mu", "1", "--imaginary-reference", "bad.csv"], "bad.csv:3:2:"),
    (["--mu", "1i:2"], "--mu"),
])
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, args, message):
    src = gaussian_slopes(tmp_path / "g.csv")
    (tmp_path / "bad.csv").write_text("nu,value,error\n0.1,1,0.1\n0.2,abc,0.1\n")
    res = signfree("run", src, *args, "--out", "out", cwd=tmp_path)
    assert res.returncode == 2
    assert message in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert "Traceback" not in res.stderr
    assert not (tmp_path / "out").exists()


def test_compare_takes_real_mu_only(tmp_path):
    src = gaussian_slopes(tmp_path / "g.csv")
    res = signfree("compare", src, "--mu", "0:1i:3", "--out", "out", cwd=tmp_path)
    assert res.returncode == 2 and "real mu only" in res.stderr
    assert not (tmp_path / "out").exists()
