"""Figures and the HTML report: the figures draw what the results table
says (log10 |Z| even below 1e-308, the cancellation depth, every data
point), the page is self-contained and loads in headless Chromium, and the
report command writes its files atomically or fails with one line."""
import argparse
import base64
import html
import re
import shutil
import subprocess
import tempfile
from fractions import Fraction
from pathlib import Path
from types import SimpleNamespace

import matplotlib
import mpmath
import numpy as np
import pytest

matplotlib.use("Agg")

from signfree.cli import options as cli_options, run as cli_run  # noqa: E402
from signfree.cli import report as cli_report  # noqa: E402
from signfree.report import figures, routes, style  # noqa: E402
from signfree.report import page as report_page  # noqa: E402
from signfree.analysis.results import ResultTable, Row, error_string  # noqa: E402
from test_cli import gaussian_slopes  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "data" / "demo"
CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists()
                                        else None)


def options(mu, **kw):
    base = dict(mu=mu, volume=None, kind=None, symmetry=None, model="chebyshev", degree=None,
                digits=12, certify=False, errors="auto", bootstrap=200, seed=None)
    base.update(kw)
    return argparse.Namespace(**base)


@pytest.fixture(scope="module")
def gauss(tmp_path_factory):
    """ln rho = -q^2/2 on [-5, 5] with noisy slopes: ok rows, then rows
    past mu ~ 3 where a ripple below the noise could change the value."""
    src = gaussian_slopes(tmp_path_factory.mktemp("g") / "g.csv", sigma=1.0, half_range=5.0,
                          width=0.25, noise=0.003)
    analysis, files = cli_run.run_files(src, options("0:8:33"))
    return analysis, files


def exact_gauss(mus):
    return {Fraction(m): mpmath.exp(-(mpmath.mpf(Fraction(m).numerator) / Fraction(m).denominator)
                                    ** 2 / 2) for m in mus}


def lines_by_gid(ax):
    return {line.get_gid(): line for line in ax.get_lines() if line.get_gid()}


def test_phase_figure_plots_the_tables_log10_values(gauss):
    analysis, _ = gauss
    table = analysis.table
    reference = exact_gauss([r.mu for r in table.rows])
    fig = figures.make_figures(analysis, reference=reference)["phase"]
    ax = fig.axes[0]
    lines = lines_by_gid(ax)
    x, y = (np.asarray(v, dtype=float) for v in lines["value"].get_data())
    records = table.records()
    assert x.tolist() == [float(r.mu) for r in table.rows]
    expected = np.array([-float(rec["cancel_orders"]) for rec in records])
    digit = np.array([rec["avg_phase"] != "" for rec in records])
    # the line joins the values with supported digits ...
    assert np.allclose(y[digit], expected[digit], atol=0.006)
    assert np.isnan(y[~digit]).all() and (~digit).any()
    lo, hi = ax.get_ylim()
    assert lo < expected.min() and hi > expected.max()
    # ... and every non-ok row has its status mark at its table height: filled
    # with digits, open at the bound -cancel_orders without
    for status in ("edge_limited", "noise_limited", "unresolved"):
        for bound in (False, True):
            rows = [k for k, rec in enumerate(records)
                    if rec["status"] == status and digit[k] != bound]
            mark = lines.get(f"status:{status}" + (":bound" if bound else ""))
            assert (mark is None) == (not rows)
            if rows:
                assert np.allclose(mark.get_ydata(), expected[rows], atol=0.006)
                assert (mark.get_markerfacecolor() == "white") == bound
    assert any(rec["status"] in ("edge_limited", "noise_limited") for rec in records)
    # the reference follows log10 of the closed form; sign changes are shaded
    rx, ry = lines["reference"].get_data()
    assert np.allclose(ry, [-(float(m) ** 2) / 2 / np.log(10) for m in rx], atol=1e-9)
    assert len(sign_spans(ax)) == len(table.sign_changes())
    assert ax.get_ylabel() == r"$\log_{10}|Z(\mu)/Z(0)|$" and ax.get_xlabel() == r"$\mu$"


def sign_spans(ax):
    green = matplotlib.colors.to_rgb(style.OKABE_ITO["green"])
    return [p for p in ax.patches if tuple(p.get_facecolor()[:3]) == green]


def test_values_far_below_the_smallest_double_are_plotted():
    # |Z| down to 1e-1000 never passes through a float; the sign alternates
    # from mu = 1.5 on, so three sign changes are bracketed
    mus = [Fraction(k, 2) for k in range(6)]
    signs = [1, 1, 1, -1, 1, -1]
    rows = [Row(mu=m, value=mpmath.mpc(signs[k] * mpmath.mpf(10) ** (-200 * k), 0),
                quad_err=mpmath.mpf(10) ** (-200 * k - 20), edge_err=mpmath.mpf(0))
            for k, m in enumerate(mus)]
    table = ResultTable(rows=rows, model_label="test", info={})
    with matplotlib.rc_context(style.STYLE):
        phase, depth = figures.phase_figure(table), figures.depth_figure(table)
    y = lines_by_gid(phase.axes[0])["value"].get_ydata()
    assert np.allclose(y, [-200.0 * k for k in range(6)])
    spans = sign_spans(phase.axes[0])
    assert [(p.get_x(), p.get_x() + p.get_width()) for p in spans] == [(1, 1.5), (1.5, 2),
                                                                        (2, 2.5)]
    d = lines_by_gid(depth.axes[0])
    assert np.allclose(d["depth"].get_ydata(), [200.0 * k for k in range(6)])
    # no horizon stated: the last ok mu is marked
    assert d["horizon"].get_xdata()[0] == pytest.approx(2.5)
    assert "last ok" in d["horizon"].get_label()


def test_depth_figure_matches_cancel_orders_and_marks_the_horizon(gauss):
    analysis, _ = gauss
    table = analysis.table
    lines = lines_by_gid(figures.make_figures(analysis)["depth"].axes[0])
    depth = lines["depth"].get_ydata()
    records = table.records()
    for d, rec in zip(depth, records):
        if rec["avg_phase"]:
            assert d == pytest.approx(float(rec["cancel_orders"]), abs=0.005)
        else:
            assert np.isnan(d)
    marks = [v for gid, line in lines.items() if gid.startswith("status:")
             for v in line.get_ydata()]
    assert sorted(marks) == pytest.approx(sorted(float(rec["cancel_orders"]) for rec in records
                                                 if rec["status"] != "ok"), abs=0.005)
    # the error line: -log10(total error) at every mu but mu = 0, where
    # Z(0)/Z(0) = 1 by definition (common practice: nothing to show there)
    err = lines["error_depth"].get_ydata()
    assert table.rows[0].mu == 0 and np.isnan(err[0])
    assert np.allclose(err[1:], [-float(mpmath.log10(r.total_err)) for r in table.rows[1:]])
    assert lines["horizon"].get_xdata()[0] == pytest.approx(table.info["horizon"]["mu"])


@pytest.mark.parametrize("name, mu", [("rotors_slopes.csv", "0:2:5"),
                                      ("rotors_log_density.csv", "0:2:5")])
def test_fit_figure_shows_every_data_point_and_its_residual(name, mu):
    analysis, _ = cli_run.run_files(DEMO / name, options(mu))
    fig = figures.make_figures(analysis)["fit"]
    n = analysis.density.n_points
    top, resid_ax = fig.axes[0], fig.axes[-1]
    data = lines_by_gid(top)["data"]
    assert len(data.get_xdata()) == n
    if analysis.density.kind == "slopes":
        assert len(fig.axes) == 3
        assert np.allclose(data.get_ydata(), analysis.density.value)
        assert top.get_ylabel() == r"$d\ln\rho/dq$" and fig.axes[1].get_ylabel() == r"$\ln\rho$"
    else:
        assert len(fig.axes) == 2 and top.get_ylabel() == r"$\ln\rho$"
    resid = lines_by_gid(resid_ax)["residuals"].get_ydata()
    assert len(resid) == n and np.all(np.isfinite(resid))
    # the residuals are those the fit judged: their sum of squares is its chi^2
    # (which for errors from the scatter of replicas carries the Student-t
    # factor (nu - 2)/nu of their pooled degrees of freedom)
    info = analysis.table.info
    assert float(np.sum(resid ** 2)) * info["chi2_scale"] == pytest.approx(info["chi2"], rel=1e-6)
    assert resid_ax.get_xlabel() == r"$q$"
    assert top.get_shared_x_axes().joined(top, resid_ax)
    assert fig.get_figwidth() == pytest.approx(style.COLUMN_WIDTH)


class Comparison:
    """Routes side by side, as records with the keys of compare.csv."""

    def __init__(self, analyses):
        self.analyses = analyses
        self.reference = analyses[0].table.info["model"]

    def records(self):
        return [dict(rec, model=a.table.info["model"], total_err=error_string(r.total_err))
                for a in self.analyses for r, rec in zip(a.table.rows, a.table.records())]


def test_compare_and_zeros_figures(gauss, tmp_path):
    analysis, _ = gauss
    src = Path(analysis.density.source)
    other, _ = cli_run.run_files(src, options("0:8:33", model="piecewise"))
    comparison = Comparison([analysis, other])
    zeros = SimpleNamespace(box=(0.0, 3.0, -1.0, 1.0), radius=mpmath.mpf(1.25), count=3, zeros=[
        SimpleNamespace(re=mpmath.mpf(1.5), im=mpmath.mpf(0.5), err=mpmath.mpf(0.01)),
        SimpleNamespace(re=1.5, im=-0.5, err=0.01, multiplicity=2, converged=False)])
    figs = figures.make_figures(analysis, comparison=comparison, zeros=zeros)
    assert list(figs) == ["fit", "phase", "depth", "compare", "zeros"]
    lines = lines_by_gid(figs["compare"].axes[0])
    assert {"model:" + analysis.table.info["model"], "model:piecewise"} <= set(lines)
    chosen = lines["model:" + analysis.table.info["model"]]
    ok = [k for k, rec in enumerate(analysis.table.records()) if rec["avg_phase"]]
    assert np.allclose(np.asarray(chosen.get_ydata())[ok],
                       [-float(analysis.table.records()[k]["cancel_orders"]) for k in ok])
    label, devs = routes.comparison_deviations(comparison)
    assert label == analysis.table.info["model"] and devs["piecewise"][0]
    # both models rest on the same slopes: they agree within the summed total errors
    assert max(abs(d) for d in devs["piecewise"][1]) < 1
    for mu, d in zip(*devs["piecewise"][:2]):
        k = [float(r.mu) for r in analysis.table.rows].index(mu)
        a, b = analysis.table.rows[k], other.table.rows[k]
        assert abs(d) <= float(abs(a.value - b.value) / (a.total_err + b.total_err)) * 1.5 + 0.5
    zax = figs["zeros"].axes[0]
    box = [p for p in zax.patches if p.get_label() == "searched box"][0]
    assert (box.get_x(), box.get_y(), box.get_width(), box.get_height()) == (0, -1, 3, 2)
    assert zax.get_xlabel() == r"$\mathrm{Re}\,\mu$"
    zl = lines_by_gid(zax)
    assert np.allclose(np.hypot(*zl["radius"].get_data()), 1.25)
    assert [t.get_text() for t in zax.texts] == ["×2"]
    page = report_page.html_report(analysis, {}, {}, comparison=comparison, zeros=zeros)
    check_self_contained(page, images=False)
    assert 'id="zeros-table"' in page and 'id="comparison-table"' in page
    assert "2 zero(s) refined, 3 by the argument principle" in page


def test_write_figures_gives_png_and_pdf_bytes_for_write_files(gauss, tmp_path):
    analysis, _ = gauss
    figs = figures.make_figures(analysis)
    files = figures.write_figures({"phase": figs["phase"]}, tmp_path / "out")
    assert sorted(files) == ["fig_phase.pdf", "fig_phase.png"]
    png, pdf = files["fig_phase.png"], files["fig_phase.pdf"]
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and pdf[:5] == b"%PDF-"
    width = int.from_bytes(png[16:20], "big")
    assert width == pytest.approx(style.COLUMN_WIDTH * style.PNG_DPI, abs=2)
    assert (tmp_path / "out" / "fig_phase.png").read_bytes() == png
    assert figures.write_figures({"phase": figs["phase"]})["fig_phase.pdf"] == pdf  # reproducible


def check_self_contained(page, images=True):
    assert page.startswith("<!DOCTYPE html>")
    assert "<script" not in page.lower() and "<link" not in page.lower()
    srcs = re.findall(r"""src\s*=\s*["']?([^"'\s>]*)""", page, flags=re.I)
    assert bool(srcs) == images and all(s.startswith("data:image/png;base64,") for s in srcs)
    stripped = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", page)
    assert "http" not in stripped.lower() and "url(" not in stripped.lower()
    for uri in re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", page):
        assert base64.b64decode(uri)[:8] == b"\x89PNG\r\n\x1a\n"


def test_html_report_is_self_contained_and_escaped(gauss):
    analysis, files = gauss
    import json
    summary = json.loads(files["summary.json"])
    analysis.table.info["notes"].append("<script>alert('x')</script> & more")
    try:
        figs = figures.make_figures(analysis)
        page = report_page.html_report(analysis, figs, summary)
    finally:
        analysis.table.info["notes"].pop()
    check_self_contained(page)
    assert html.escape("<script>alert('x')</script> & more") in page
    assert summary["input"]["sha256"] in page
    for word in ("quad_err", "model_err", "edge_err", "avg_phase_err", "edge_limited",
                 "unresolved", "noise_limited", analysis.table.info["model"],
                 analysis.table.info["degree_criterion"], "run seconds"):
        assert html.escape(str(word)) in page
    rows = re.findall(r"<tr class=\"status-", page)
    assert len(rows) == len(analysis.table.rows)


def report_parser():
    parser = cli_options.Parser(prog="signfree")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=cli_options.Parser)
    cli_report.add_parser(sub)
    return parser


def run_report(*argv):
    return cli_report.cmd_report(report_parser().parse_args(["report", *map(str, argv)]))


def chromium_dom(page_path, tmp_path):
    """The DOM of the page after loading in headless Chromium, and its exit
    status; a probe copy of the page records how many images decoded."""
    probe = tmp_path / "probe.html"
    text = page_path.read_text()
    script = ("<script>window.addEventListener('load', function () {"
              "var n = 0; for (var im of document.images) {"
              " if (im.complete && im.naturalWidth > 0) n++; }"
              "document.body.setAttribute('data-decoded', String(n)); });</script>")
    probe.write_text(text.replace("</body>", script + "</body>"))
    profile = tempfile.mkdtemp(dir=tmp_path)
    res = subprocess.run([CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu",
                          "--disable-quic", "--no-first-run", "--disable-background-networking",
                          "--disable-component-update", "--disable-sync",
                          f"--user-data-dir={profile}", "--virtual-time-budget=5000",
                          "--dump-dom", probe.as_uri()],
                         capture_output=True, text=True, timeout=120)
    return res


def test_report_command_writes_a_page_that_loads_in_chromium(tmp_path, capsys):
    src = gaussian_slopes(tmp_path / "g.csv", sigma=1.0, half_range=5.0, width=0.25, noise=0.003)
    ref = tmp_path / "exact.csv"
    mus = [Fraction(k, 4) for k in range(33)]
    ref.write_text("mu,value\n" + "".join(f"{float(m)},{mpmath.nstr(v, 20)}\n"
                                          for m, v in exact_gauss(mus).items()))
    out = tmp_path / "out"
    assert run_report(src, "--mu", "0:8:33", "--reference", ref, "--out", out) == 0
    assert "report.html" in capsys.readouterr().out
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(["report.html", "results.csv", "summary.json"]
                           + [f"fig_{n}.{e}" for n in ("fit", "phase", "depth")
                              for e in ("png", "pdf")])
    page = (out / "report.html").read_text()
    check_self_contained(page)
    assert page.count("<img ") == 3 and 'id="results-table"' in page
    assert "reference" in page and "0.6065" in page  # exp(-1/2) beside mu = 1
    if CHROMIUM is None:
        pytest.skip("chromium not found (install with .ci/install-chromium): the page was "
                    "checked as text but not loaded in a browser")
    res = chromium_dom(out / "report.html", tmp_path)
    assert res.returncode == 0, res.stderr[-2000:]
    dom = res.stdout
    assert 'id="results-table"' in dom and 'data-decoded="3"' in dom
    body = dom.split('id="results-table"', 1)[1].split("</table>", 1)[0]
    assert body.count("<tr class=\"status-") == 33


@pytest.mark.parametrize("argv, word", [
    (["missing.csv", "--mu", "0:1:3"], "missing.csv: file not found"),
    (["g.csv", "--mu", "0:1"], "--mu"),
    (["g.csv", "--mu", "0:1:3", "--reference", "nope.csv"], "nope.csv"),
    (["g.csv", "--mu", "0:1:3", "--reference", "bad.csv"], "bad.csv"),
])
def test_report_bad_input_one_line_exit_2_nothing_written(tmp_path, capsys, monkeypatch,
                                                          argv, word):
    monkeypatch.chdir(tmp_path)
    gaussian_slopes(tmp_path / "g.csv", half_range=5.0)
    (tmp_path / "bad.csv").write_text("mu,value\n0.5,abc\n")
    before = sorted(p.name for p in tmp_path.iterdir())
    assert run_report(*argv, "--out", "out") == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("signfree: ") and word in err[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_figures_files_for_run_plots(gauss, monkeypatch):
    analysis, _ = gauss
    monkeypatch.setattr(figures, "_pdf", lambda fig: b"%PDF-")  # PDF is checked above
    files = figures.figures_files(analysis)
    assert sorted(files) == sorted(f"fig_{n}.{e}" for n in ("fit", "phase", "depth")
                                   for e in ("png", "pdf"))
    assert all(isinstance(v, bytes) and v for v in files.values())
