"""The command line end to end: files in, results.csv and summary.json out,
checked against closed forms; bad input gives one line and exit status 2 and
writes nothing."""
import csv
import hashlib
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import mpmath
import numpy as np
import pytest

REQUIRED = ["mu", "avg_phase", "avg_phase_imag", "avg_phase_err", "delta_f", "cancel_orders",
            "quad_err", "model_err", "edge_err", "status"]


ROOT = Path(__file__).resolve().parent.parent


def signfree(*args, cwd):
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(ROOT)] + ([os.environ["PYTHONPATH"]] if os.environ.get("PYTHONPATH") else [])))
    return subprocess.run([sys.executable, "-m", "signfree", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=300, env=env)


def gaussian_slopes(path, sigma=3.0, half_range=60.0, width=0.5, noise=0.0, seed=0,
                    header="# kind: slopes\n# volume: 20\n"):
    """Slopes of ln rho = -q^2/(2 sigma^2): the interval average is exactly
    -q_centre / sigma^2."""
    rng = np.random.default_rng(seed)
    centres = np.arange(-half_range + width / 2, half_range, width)
    with open(path, "w") as f:
        f.write(header + "q,width,slope,slope_err\n")
        for c in centres:
            s = -c / sigma ** 2 + noise * rng.standard_normal()
            f.write(f"{float(c)!r},{width!r},{float(s)!r},{max(noise, 1e-13)!r}\n")
    return path


def read_results(folder):
    with open(folder / "results.csv") as f:
        return list(csv.DictReader(f))


def test_run_gaussian_slopes_against_the_closed_form(tmp_path):
    # Gradshteyn & Ryzhik 3.896.4: Z(mu)/Z(0) = exp(-mu^2 sigma^2 / 2); with
    # +-20 sigma of range the edges are below 1e-86. The slopes are exact but
    # stated to 1e-13: a ripple in ln rho of that size is invisible to them
    # and moves Z(mu)/Z(0) by about as much at any mu, so rows down to
    # ~1e-12 are ok and agree to the digits they print, and the deeper rows
    # (down to D = 70, still computed at the precision they need) are not ok.
    src = gaussian_slopes(tmp_path / "g.csv")
    res = signfree("run", src, "--mu", "0:6:13", "--out", "out", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    rows = read_results(tmp_path / "out")
    assert set(REQUIRED) <= set(rows[0]) and list(rows[0])[0] == "mu"
    assert len(rows) == 13
    for row in rows:
        mu = float(row["mu"])
        exact = mpmath.exp(-mpmath.mpf(mu) ** 2 * 9 / 2)
        if exact > 1e-7:
            assert row["status"] == "ok"
        if exact < 1e-15:
            assert row["status"] == "noise_limited"
        if row["status"] != "ok":
            continue
        got = mpmath.mpf(row["avg_phase"])
        # results.csv keeps two guard digits past the last supported one
        digits = len(row["avg_phase"].split("e")[0].replace(".", "").lstrip("0")) - 2
        assert digits >= (10 if exact > 1e-2 else 1)
        assert abs(got - exact) <= 10 ** (-digits + 1) * exact
        assert float(row["cancel_orders"]) == pytest.approx(float(-mpmath.log10(exact)), abs=0.01)
        assert row["avg_phase_imag"] == "0"
        df = row["delta_f"]
        places = len(df.split("e")[0].split(".")[1]) if "." in df else 0
        assert float(df) == pytest.approx(mu ** 2 * 9 / 2 / 20, abs=10 ** -places + 1e-12)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["input"]["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()
    assert summary["model"] == "chebyshev:2" and summary["parity"] == "even"
    # the path through the saddle keeps the precision near the digits asked for;
    # the values above are what must be right
    assert summary["precision_digits"] >= 12
    assert summary["statuses"]["ok"] >= 5
    assert summary["horizon"]["reason"] == "noise"
    assert summary["versions"]["python-flint"]


def test_edge_limited_case_is_not_ok(tmp_path):
    # Range +-4 sigma: the endpoint terms rho(b)/|p'(b) + i mu| / Z(0) come to
    # about 5e-5 (common practice: integration by parts), so past D ~ 4 the value
    # is what the range cut-off makes, and those rows must say so; at mu = 3
    # (value 1.1e-2) the edge allows only a few digits.
    src = gaussian_slopes(tmp_path / "g.csv", sigma=1.0, half_range=4.0, width=0.25)
    res = signfree("run", src, "--mu", "0,1,3,5,8", "--out", "out", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    rows = {float(r["mu"]): r for r in read_results(tmp_path / "out")}
    assert rows[0.0]["status"] == rows[1.0]["status"] == rows[3.0]["status"] == "ok"
    assert float(rows[3.0]["avg_phase"]) == pytest.approx(math.exp(-4.5), rel=1e-2)
    # at most 4 supported digits, and results.csv keeps two guard digits more
    assert len(rows[3.0]["avg_phase"].replace("0.0", "")) <= 5 + 2
    for mu in (5.0, 8.0):
        assert rows[mu]["status"] == "edge_limited"
        assert float(rows[mu]["edge_err"]) > 0.1 * math.exp(-mu ** 2 / 2)
    assert rows[8.0]["avg_phase"] == ""  # not one digit is supported


def test_piecewise_model_and_degree_option(tmp_path):
    src = gaussian_slopes(tmp_path / "g.csv")
    res = signfree("run", src, "--mu", "0.5", "--model", "piecewise", "--out", "pw", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    row = read_results(tmp_path / "pw")[0]
    # continuity reconstruction of an exactly linear slope is exact at the knots;
    # between them ln rho is linear, a relative change of order width^2/(8 sigma^2)
    assert float(row["avg_phase"]) == pytest.approx(math.exp(-0.5 ** 2 * 9 / 2), rel=2e-3)
    assert row["model_err"] != ""
    res = signfree("run", src, "--mu", "0.5", "--degree", "6", "--out", "d6", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert json.loads((tmp_path / "d6" / "summary.json").read_text())["degree"] == 6


def test_default_output_folder_is_new_and_printed(tmp_path):
    src = gaussian_slopes(tmp_path / "g.csv")
    res = signfree("run", src, "--mu", "1", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    made = [p for p in tmp_path.iterdir() if p.name.startswith("signfree-run-")]
    assert len(made) == 1
    assert str(made[0].name) in res.stdout
    assert (made[0] / "results.csv").exists() and (made[0] / "summary.json").exists()


BAD = {
    "nan": ("q,width,slope\n0,1,1\n1,1,nan\n2,1,3\n", "g.csv:3:3:"),
    "text": ("q,width,slope\n0,1,1\n1,1,abc\n2,1,3\n", "g.csv:3:3:"),
    "missing_column": ("q,slope\n0,1\n1,2\n2,3\n", "g.csv:1:"),
    "empty": ("", "g.csv:"),
    "no_rows": ("# kind: slopes\nq,width,slope\n", "g.csv:"),
    "width": ("q,width,slope\n0,1,1\n1,0,2\n2,1,3\n", "g.csv:3:2:"),
    "negative_count": ("q,count\n0,1\n1,-2\n2,3\n", "g.csv:3:2:"),
    "repeated_q": ("q,width,slope\n0,1,1\n1,1,2\n1,1,3\n", "g.csv:4:1:"),
    "unknown_kind": ("# kind: moments\nq,width,slope\n0,1,1\n1,1,2\n2,1,3\n", "g.csv:1:"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_input_gives_one_line_exit_2_and_writes_nothing(tmp_path, case):
    text, where = BAD[case]
    (tmp_path / "g.csv").write_text(text)
    res = signfree("run", "g.csv", "--mu", "0:1:3", "--out", "out", cwd=tmp_path)
    assert res.returncode == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"signfree: {where}")
    assert "Traceback" not in res.stderr
    assert not (tmp_path / "out").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["g.csv"]


@pytest.mark.parametrize("args, word", [
    (["--mu", "0:1"], "--mu"),
    (["--mu", "a,b"], "--mu"),
    (["--mu", "1", "--degree", "400"], "degree 400"),
    (["--mu", "1", "--digits", "0"], "--digits"),
    (["--mu", "1", "--model", "spline"], "--model"),
])
def test_bad_options_give_one_line_exit_2(tmp_path, args, word):
    gaussian_slopes(tmp_path / "g.csv", half_range=5.0)
    res = signfree("run", "g.csv", *args, "--out", "out", cwd=tmp_path)
    assert res.returncode == 2
    assert len(res.stderr.strip().splitlines()) == 1 and word in res.stderr
    assert not (tmp_path / "out").exists()


def test_run_lists_the_real_sign_changes(tmp_path):
    # rho = (1 + c q^2) exp(-q^2/2) has Z(mu)/Z(0) = exp(-mu^2/2) (1 + c (1 - mu^2)) / (1 + c)
    # (Gradshteyn & Ryzhik 3.896.4 and its second derivative in mu): one real
    # zero at mu = sqrt(1 + 1/c). Exact ln rho on a grid, tiny stated errors.
    c = 0.1
    q = np.linspace(-8, 8, 161)
    lnrho = np.log(1 + c * q ** 2) - q ** 2 / 2
    src = tmp_path / "c.csv"
    src.write_text("q,log_density,log_density_err\n" +
                   "".join(f"{float(x)!r},{float(y)!r},1e-10\n" for x, y in zip(q, lnrho)))
    res = signfree("run", src, "--mu", "0:4:41", "--out", "out", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    zero = math.sqrt(1 + 1 / c)
    assert summary["sign_changes"] == [[3.3, 3.4]]
    assert 3.3 < zero < 3.4
    rows = {float(r["mu"]): r for r in read_results(tmp_path / "out")}
    for mu in (3.0, 3.5):
        exact = math.exp(-mu ** 2 / 2) * (1 + c * (1 - mu ** 2)) / (1 + c)
        assert float(rows[mu]["avg_phase"]) == pytest.approx(exact, rel=1e-6)


def test_several_inputs_in_parallel_match_single_runs(tmp_path):
    # --jobs 2 runs each input in its own process; the numbers must be the
    # same as a run of that input alone (same engine, same data).
    a = gaussian_slopes(tmp_path / "a.csv", sigma=2.0, half_range=30.0)
    b = gaussian_slopes(tmp_path / "b.csv", sigma=3.0, half_range=45.0)
    res = signfree("run", a, b, "--mu", "0:2:5", "--jobs", "2", "--out", "both", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    alone = signfree("run", b, "--mu", "0:2:5", "--out", "b_alone", cwd=tmp_path)
    assert alone.returncode == 0, alone.stderr
    assert read_results(tmp_path / "both" / "b") == read_results(tmp_path / "b_alone")
    rows = read_results(tmp_path / "both" / "a")
    exact = math.exp(-2.0 ** 2 * 4 / 2)  # GR 3.896.4 at mu = 2, sigma = 2
    assert float(rows[-1]["avg_phase"]) == pytest.approx(exact, rel=1e-9)


def test_certified_run_and_figures(tmp_path):
    # --certify: rigorous acb.integral enclosures; the value must still match
    # Gradshteyn & Ryzhik 3.896.4, and --plots adds the three figures.
    src = gaussian_slopes(tmp_path / "g.csv", sigma=1.0, half_range=25.0)
    res = signfree("run", src, "--mu", "0,3", "--certify", "--plots", "--out", "out",
                   cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["integration"] == "acb.integral"
    row = read_results(tmp_path / "out")[1]
    assert float(row["avg_phase"]) == pytest.approx(math.exp(-4.5), rel=1e-10)
    for name in ("fit", "phase", "depth"):
        assert (tmp_path / "out" / f"fig_{name}.png").stat().st_size > 5000
        assert (tmp_path / "out" / f"fig_{name}.pdf").read_bytes().startswith(b"%PDF")
