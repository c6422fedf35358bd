"""The routes side by side: Chebyshev degrees, cumulant series, piecewise
baseline; where they agree, where they part, and the ``compare`` command."""
import argparse
import csv
import json
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest

from signfree.analysis.settings import parse_mu_spec
from signfree.analysis.compare import COLUMNS, compare
from signfree.cli.compare import add_parser as add_compare_parser, cmd_compare
from signfree.density import Density


def gaussian_slopes(sigma=3.0, half_range=60.0, width=0.5):
    """Interval-average slopes of ln rho = -q^2 / (2 sigma^2): exactly
    -q_centre / sigma^2."""
    c = np.arange(-half_range + width / 2, half_range, width)
    return Density(kind="slopes", q=c, value=-c / sigma ** 2, width=np.full_like(c, width),
                   error=np.full_like(c, 1e-9), error_source="stated")


# Gradshteyn & Ryzhik 3.896.4: Z(mu)/Z(0) = exp(-sigma^2 mu^2 / 2), which
# is the order-2 cumulant series exactly; the range +-20 sigma puts the
# edges below 1e-86 and Z has no zero: the search finds none, so only a
# lower bound of the radius is known. Slopes known to 1e-9 fix Z only to
# about 1e-10 (a ripple of that size is invisible), so the rows deeper than
# that are not ok, and every ok row holds the exact value.
def test_gaussian_chebyshev_and_cumulant2_agree_where_both_are_ok():
    mus = parse_mu_spec("0:3:7")
    res = compare(gaussian_slopes(), mus, digits=12)
    assert res.reference == "chebyshev:2"
    assert {"chebyshev:4", "chebyshev:6", "cumulant:2", "cumulant:4", "cumulant:6",
            "cumulant:8", "piecewise"} <= set(res.routes)
    assert res.radius is None and res.info["radius_at_least"] >= 3
    both_ok = 0
    for k, v in enumerate(res.verdicts()):
        cheb, cum = res.routes["chebyshev:2"][k], res.routes["cumulant:2"][k]
        if cheb.status == "ok" and cum.status == "ok":
            both_ok += 1
            assert "cumulant:2" in v["agree"]
        mu = mpmath.mpf(mus[k].numerator) / mus[k].denominator
        exact = mpmath.exp(-9 * mu ** 2 / 2)
        assert abs(cum.value - exact) <= cum.total_err + 1e-13 * exact
        if exact > 1e-8:
            assert cheb.status == "ok"
        elif exact < 1e-12:
            assert cheb.status != "ok" and cum.status != "ok"
    assert both_ok >= 3
    # the piecewise reconstruction has a cusp floor (its transform decays only
    # like 1/mu^2, common practice): at mu = 3, where Z/Z0 = 2.6e-18, it can
    # not agree
    assert "piecewise" not in res.verdicts()[-1]["agree"]
    recs = res.records()
    assert set(COLUMNS) <= set(recs[0]) and len(recs) == len(mus) * len(res.routes)
    assert {r["model"] for r in recs} == set(res.routes)
    assert "reference: chebyshev:2" in res.text()


def cosh_log_density(a=0.5, half_range=8.5, n=161):
    q = np.linspace(-half_range, half_range, n)
    return Density(kind="log_density", q=q, value=np.logaddexp(a * q, -a * q) - q ** 2 / 2,
                   error=np.full(n, 1e-10), error_source="stated")


# Gradshteyn & Ryzhik 3.896.4 (shifted argument): ln rho = ln cosh(a q) - q^2/2
# has Z(mu)/Z(0) = e^{-mu^2/2} cos(a mu), so ln Z = -(1 + a^2) mu^2 / 2 +
# ln cos(a mu) + a^2 mu^2 / 2; with ln cos x = -x^2/2 - x^4/12 - x^6/45 - ...
# (Abramowitz & Stegun 4.3.72): kappa_2 = 1 + a^2, kappa_4 = -2 a^4,
# kappa_6 = 16 a^6. The first zero is at mu = pi/(2a) = pi, the convergence
# radius of the cumulant series: past it the series routes are
# 'beyond_radius'; below it the truncated series part from the smoothing
# where the dropped terms exceed the errors.
def test_cosh_density_cumulants_radius_and_parting_routes():
    a = 0.5
    mus = [Fraction(1, 2), Fraction(3, 2), Fraction(5, 2), Fraction(7, 2)]
    res = compare(cosh_log_density(a), mus, digits=10, max_cumulant_order=6)
    kappa = [mpmath.mpf(k) for k in res.info["kappa"]]
    assert float(kappa[1]) == pytest.approx(1 + a * a, rel=1e-8)
    assert float(kappa[3]) == pytest.approx(-2 * a ** 4, rel=1e-6)
    assert float(kappa[5]) == pytest.approx(16 * a ** 6, rel=1e-4)
    assert res.radius == pytest.approx(math.pi, rel=1e-8)
    ref = res.routes[res.reference]
    for k, mu in enumerate(mus):
        exact = math.exp(-float(mu) ** 2 / 2) * math.cos(a * float(mu))
        assert float(ref[k].value.real) == pytest.approx(exact, rel=1e-6)
    v = {vv["mu"]: vv for vv in res.verdicts()}
    assert all(res.routes[f"cumulant:{K}"][3].status == "beyond_radius" for K in (2, 4, 6))
    assert v["3.5"]["skipped"]["cumulant:2"] == "beyond_radius"
    # below the radius every truncated series agrees within its model error
    # (its difference from the full transform, plus that one's errors),
    # though at mu = 1.5 the order-2 series misses a^4 mu^4 / 12 ~ 0.026 of
    # ln Z
    for mu in ("0.5", "1.5", "2.5"):
        assert {"cumulant:2", "cumulant:4", "cumulant:6"} <= set(v[mu]["agree"])
    c2 = res.routes["cumulant:2"][1]
    exact = math.exp(-1.5 ** 2 / 2) * math.cos(a * 1.5)
    assert abs(float(c2.value.real) - exact) <= c2.total_err
    assert abs(float(c2.value.real) - exact) > 0.02 * exact


def run(argv):
    parser = argparse.ArgumentParser(prog="signfree")
    add_compare_parser(parser.add_subparsers(dest="command"))
    return cmd_compare(parser.parse_args(argv))


def write_slopes(path, sigma=3.0, half_range=30.0, width=0.5):
    c = np.arange(-half_range + width / 2, half_range, width)
    with open(path, "w") as f:
        f.write("# kind: slopes\nq,width,slope,slope_err\n")
        for ci in c:
            f.write(f"{float(ci)!r},{width!r},{float(-ci / sigma ** 2)!r},1e-9\n")
    return path


# Gradshteyn & Ryzhik 3.896.4, as above
def test_compare_command_writes_csv_and_prints_verdicts(tmp_path, capsys):
    src = write_slopes(tmp_path / "g.csv")
    out = tmp_path / "cmp"
    assert run(["compare", str(src), "--mu", "0:2:5", "--out", str(out), "--max-order", "4"]) == 0
    with open(out / "compare.csv") as f:
        rows = list(csv.DictReader(f))
    assert list(rows[0]) == list(COLUMNS)
    assert {r["model"] for r in rows} >= {"chebyshev:2", "cumulant:2", "cumulant:4", "piecewise"}
    summary = json.loads((out / "summary.json").read_text())
    assert summary["reference"] == "chebyshev:2" and len(summary["verdicts"]) == 5
    printed = capsys.readouterr().out
    assert "mu = 1: agree" in printed and "cumulant:2" in printed


# DLMF 10.35.1: the difference of two Poisson(lam) counts (Skellam) has
# Z(theta)/Z(0) = exp(2 lam (cos theta - 1)); raw samples of it go through
# the samples reader, their k-statistics and a lattice histogram
def test_compare_command_on_raw_samples(tmp_path, capsys):
    rng = np.random.default_rng(3)
    lam = 4.0
    q = rng.poisson(lam, 20000) - rng.poisson(lam, 20000)
    src = tmp_path / "s.csv"
    src.write_text("# kind: samples\nq\n" + "\n".join(str(int(v)) for v in q) + "\n")
    out = tmp_path / "cmp"
    assert run(["compare", str(src), "--mu", "0.1,0.3,0.5", "--out", str(out),
                "--digits", "6", "--max-order", "4"]) == 0
    with open(out / "compare.csv") as f:
        rows = [r for r in csv.DictReader(f) if r["model"] == "cumulant:2"]
    assert len(rows) == 3 and all(r["avg_phase_err"] for r in rows)
    for r in rows:
        mu = float(r["mu"])
        exact = math.exp(2 * lam * (math.cos(mu) - 1))
        got, err = float(r["avg_phase"]), float(r["total_err"])
        assert abs(got - exact) <= 3 * err + 0.02 * exact
    summary = json.loads((out / "summary.json").read_text())
    assert summary["input"]["kind"] == "samples"
    assert summary["cumulants_from"].startswith("samples")


@pytest.mark.parametrize("text, args, word", [
    ("q,width,slope\n0,1,1\n1,1,nan\n2,1,3\n", ["--mu", "0:1:3"], "g.csv:3:3:"),
    ("# kind: samples\nq,weight\n1,1\n2,-1\n3,1\n4,1\n", ["--mu", "0.1"], "g.csv:4:2:"),
    ("q,width,slope\n0,1,1\n1,1,2\n2,1,3\n", ["--mu", "0:1"], "--mu"),
    ("q,width,slope\n0,1,1\n1,1,2\n2,1,3\n", ["--mu", "1", "--max-order", "1"], "--max-order"),
])
def test_compare_command_bad_input_exit_2_nothing_written(tmp_path, capsys, text, args, word):
    (tmp_path / "g.csv").write_text(text)
    out = tmp_path / "cmp"
    assert run(["compare", str(tmp_path / "g.csv"), "--out", str(out), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("signfree: ") and word in err[0]
    assert not out.exists()
