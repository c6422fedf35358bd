"""Every command and documented option combination on the demo data, as a
newcomer would type them: exit status 0 and no traceback; user mistakes give
one line and exit status 2; Ctrl-C gives one line and 130; nothing is
written half-way, existing outputs are not overwritten without --force, and
files keep ordinary permissions. Values are checked against closed forms
elsewhere (tests/test_cli.py, tests/test_rotors.py); here only that Z(0)/Z(0)
= 1 exactly (its definition) with a zero statistical error."""
import csv
import io
import os
import signal
import stat
import subprocess
import sys
import time
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import numpy as np
import pytest

from signfree.cli import join_signed_values, main
from signfree.cli.display import ProgressLine
from signfree import progress

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "data" / "demo"
SLOPES, LOGD, HIST = (DEMO / f"rotors_{k}.csv" for k in ("slopes", "log_density", "histogram"))
EXACT = DEMO / "rotors_exact.csv"


def call(*argv, cwd):
    """main(argv) in this process: (status, stdout, stderr); an uncaught
    exception (a traceback) fails the test."""
    out, err = io.StringIO(), io.StringIO()
    old = os.getcwd()
    os.chdir(cwd)
    try:
        with redirect_stdout(out), redirect_stderr(err):
            status = main([str(a) for a in argv])
    finally:
        os.chdir(old)
    return status, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def samples_file(tmp_path_factory):
    """A phase-quenched time series of the demo's charge: integer charges
    from a Gaussian of variance 10 (not the rotors; only for the options)."""
    path = tmp_path_factory.mktemp("s") / "charges.txt"
    q = np.rint(np.random.default_rng(2).normal(0, np.sqrt(10), 4000)).astype(int)
    path.write_text("# kind: samples\n# volume: 10\nq\n" + "\n".join(map(str, q)) + "\n")
    return path


RUN_OPTIONS = [
    [],
    ["--model", "piecewise"],
    ["--model", "cumulant", "--order", "6"],
    ["--degree", "8"],
    ["--degree", "per-mu"],
    ["--errors", "jackknife"],
    ["--errors", "bootstrap", "--bootstrap", "20", "--seed", "3"],
    ["--errors", "covariance"],
    ["--errors", "none"],
    ["--covariance"],
    ["--symmetry", "even", "--volume", "63", "--kind", "slopes", "--digits", "20"],
    ["--plots"],
    ["--plots", "--theta", "--model", "cumulant"],
    ["--quiet", "--certify"],
]


@pytest.mark.parametrize("options", RUN_OPTIONS, ids=lambda o: " ".join(o) or "defaults")
def test_run_with_every_option(tmp_path, options):
    status, out, err = call("run", SLOPES, "--mu", "0:1.2:7", "--out", "o", *options,
                            cwd=tmp_path)
    assert status == 0, err
    assert "Traceback" not in out + err
    folder = tmp_path / "o"
    assert (folder / "results.csv").exists() and (folder / "summary.json").exists()
    if "--plots" in options:
        assert {f"fig_{n}.png" for n in ("fit", "phase", "depth")} <= {
            p.name for p in folder.iterdir()}
    if "--covariance" in options:
        assert (folder / "covariance.csv").read_text().startswith("mu_i,mu_j,cov_re")
    with open(folder / "results.csv") as f:
        rows = list(csv.DictReader(f))
    assert [r["mu"] for r in rows] == ["0", "0.2", "0.4", "0.6", "0.8", "1", "1.2"]
    assert rows[0]["avg_phase"].startswith("1.0") and rows[0]["avg_phase_err"] in ("", "0")


@pytest.mark.parametrize("argv", [
    ["report", SLOPES, "--mu", "0:1.2:7"],
    ["report", SLOPES, "--mu", "0:1.2:7", "--model", "cumulant"],
    ["report", HIST, "--mu", "0:1:5", "--model", "piecewise", "--reference", EXACT, "--theta"],
    ["report", HIST, "--mu", "0:1:5", "--compare", "--max-order", "4", "--zeros", "0:2,-1:1"],
    ["zeros", HIST, "--box", "-2:2,-1:1"],
    ["compare", HIST, "--mu", "-1:1:5", "--max-order", "4"],
    ["run", SLOPES, LOGD, "--mu", "0:1:3", "--jobs", "2"],
    ["demo"],
], ids=lambda a: " ".join(str(x).split("/")[-1] for x in a))
def test_other_commands(tmp_path, argv):
    status, out, err = call(*argv, "--out", "o", cwd=tmp_path)
    assert status == 0, err
    assert "Traceback" not in out + err
    names = {p.name for p in (tmp_path / "o").rglob("*")}
    if argv[0] == "zeros":
        assert {"zeros.csv", "fig_zeros.png", "fig_zeros.pdf"} <= names
    if argv[0] == "compare":
        assert {"compare.csv", "fig_compare.png", "fig_compare.pdf"} <= names
    if "--compare" in argv:
        page = (tmp_path / "o" / "report.html").read_text()
        assert 'id="fig-compare"' in page and 'id="fig-zeros"' in page
        assert {"compare.csv", "zeros.csv"} <= names
        assert ">True<" not in page and ">False<" not in page
    if argv[0] == "demo":
        assert {"rotors_slopes", "rotors_log_density", "rotors_histogram"} <= names


def test_samples_input_with_every_route(tmp_path, samples_file):
    for k, options in enumerate([[], ["--model", "cumulant"], ["--model", "piecewise"]]):
        status, out, err = call("run", samples_file, "--mu", "0:0.6:4", "--out", f"o{k}",
                                *options, cwd=tmp_path)
        assert status == 0, err
        assert "samples, 4000 values binned into" in out
    status, out, err = call("compare", samples_file, "--mu", "0:0.6:4", "--out", "c",
                            cwd=tmp_path)
    assert status == 0, err
    status, out, err = call("report", samples_file, "--mu", "0:0.6:4", "--out", "r",
                            cwd=tmp_path)
    assert status == 0, err
    page = (tmp_path / "r" / "report.html").read_text()
    assert "samples (4000 values binned into" in page and "histogram data" not in page


@pytest.mark.parametrize("argv, words", [
    (["run", "missing.csv", "--mu", "0:1:3"], ["missing.csv", "file not found"]),
    (["run", SLOPES, "--mu", "1:0:x"], ["--mu"]),
    (["run", SLOPES, "--mu", "0:1:3", "--model", "piecewise", "--degree", "6"], ["--degree 6"]),
    (["run", SLOPES, "--mu", "0:1:3", "--order", "6"], ["--order"]),
    (["run", HIST, "--mu", "0:1:3", "--covariance"], ["--covariance needs"]),
    (["run", SLOPES, "--mu", "0:1:3", "--errors", "bootstrap", "--bootstrap", "1"],
     ["--bootstrap"]),
    (["zeros", SLOPES, "--box", "3:0,-1:1"], ["--box"]),
    (["compare", SLOPES, "--mu", "0:1:3", "--max-order", "1"], ["--max-order"]),
    (["report", SLOPES, "--mu", "0:1:3", "--zeros", "a:b"], ["--box"]),
    (["run", SLOPES, "--mu", "0:1:3", "--jobs", "0"], ["--jobs"]),
    (["run", SLOPES], ["--mu"]),
])
def test_mistakes_give_one_line_and_status_2(tmp_path, argv, words):
    try:
        status, out, err = call(*argv, "--out", "o", cwd=tmp_path)
    except SystemExit as exc:          # argparse's own errors exit from the parser
        status, err = exc.code, ""
    assert status == 2
    if err:
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
        for word in words:
            assert word in err
    assert not (tmp_path / "o").exists()


def test_out_is_never_overwritten_silently(tmp_path):
    (tmp_path / "afile").write_text("mine")
    status, _, err = call("run", SLOPES, "--mu", "0:1:3", "--out", "afile", cwd=tmp_path)
    assert status == 2 and "not a folder" in err and (tmp_path / "afile").read_text() == "mine"
    status, _, err = call("run", SLOPES, LOGD, "--mu", "0:1:3", "--out", "afile", cwd=tmp_path)
    assert status == 2 and len(err.strip().splitlines()) == 1
    full = tmp_path / "full"
    full.mkdir()
    (full / "notes.txt").write_text("keep")
    status, _, err = call("run", SLOPES, "--mu", "0:1:3", "--out", "full", cwd=tmp_path)
    assert status == 2 and "--force" in err
    assert sorted(p.name for p in full.iterdir()) == ["notes.txt"]
    (tmp_path / "empty").mkdir()
    assert call("run", SLOPES, "--mu", "0:1:3", "--out", "empty", cwd=tmp_path)[0] == 0
    status, _, err = call("run", SLOPES, "--mu", "0:1:3", "--out", "full", "--force",
                          cwd=tmp_path)
    assert status == 0, err
    assert sorted(p.name for p in full.iterdir()) == ["notes.txt", "results.csv",
                                                       "summary.json"]
    assert (full / "notes.txt").read_text() == "keep"


def test_written_files_keep_ordinary_permissions(tmp_path):
    # 0666 & ~umask for files, 0777 & ~umask for folders (POSIX open(2), mkdir(2))
    old = os.umask(0o022)
    try:
        assert call("run", SLOPES, "--mu", "0:1:3", "--out", "new", cwd=tmp_path)[0] == 0
        (tmp_path / "old").mkdir()
        assert call("run", SLOPES, "--mu", "0:1:3", "--out", "old", cwd=tmp_path)[0] == 0
        assert call("run", SLOPES, "--mu", "0:1:3", "--out", "old", "--force",
                    cwd=tmp_path)[0] == 0
    finally:
        os.umask(old)
    for folder in ("new", "old"):
        assert stat.S_IMODE((tmp_path / folder).stat().st_mode) == 0o755
        for f in (tmp_path / folder).iterdir():
            assert stat.S_IMODE(f.stat().st_mode) == 0o644, f
    assert not [p for p in tmp_path.rglob(".*")]     # no temporary files left


def test_negative_mu_and_box_need_no_equals_sign():
    assert join_signed_values(["run", "f", "--mu", "-1:1:5", "--box", "-3:3,-1:1", "-h"]) == \
        ["run", "f", "--mu=-1:1:5", "--box=-3:3,-1:1", "-h"]
    assert join_signed_values(["--mu", "--out", "x"]) == ["--mu", "--out", "x"]


def test_ctrl_c_gives_one_line_status_130_and_writes_nothing(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(
        [sys.executable, "-m", "signfree", "run", str(SLOPES), str(LOGD), "--jobs", "2",
         "--mu", "0:3:3001", "--digits", "100", "--certify", "--out", "o"],
        cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        start_new_session=True,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    time.sleep(4)
    os.killpg(proc.pid, signal.SIGINT)      # as a terminal's Ctrl-C: the whole group
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert err.strip().splitlines() == ["signfree: interrupted; nothing written"]
    assert not (tmp_path / "o").exists() and not list(tmp_path.iterdir())


class FakeTerminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_line_says_which_stage_and_which_mu(monkeypatch):
    from signfree.cli import display
    monkeypatch.setattr(display, "DELAY", 0.0)
    monkeypatch.setattr(display, "PERIOD", 0.01)
    screen = FakeTerminal()
    with ProgressLine(files=3, stream=screen) as line:
        progress.report("certifying by acb.integral: mu", 12, 61)
        line.file_done()
        time.sleep(0.1)
        assert "1/3 files | certifying by acb.integral: mu 12/61" in line.text()
    assert "certifying by acb.integral: mu 12/61" in screen.getvalue()
    assert screen.getvalue().endswith("\r")       # the line is cleared at the end
    quiet = FakeTerminal()
    with ProgressLine(quiet=True, stream=quiet):
        progress.report("integrating")
    assert quiet.getvalue() == ""
    assert not progress._listeners


def readme_synopsis():
    """{command: set of --options} from the README's synopsis block."""
    text = (ROOT / "README.md").read_text()
    block = text.split("## Running it", 1)[1].split("```", 2)[1]
    out, current = {}, None
    for line in block.splitlines():
        words = line.split()
        if len(words) > 1 and words[0] == "signfree":
            current = words[1]
            out[current] = set()
        if current:
            out[current] |= {w.strip("[]").split("=")[0] for w in words if
                             w.strip("[]").startswith("--")}
    return out


def test_readme_synopsis_and_help_list_the_same_options():
    import argparse
    from signfree.cli import COMMANDS, build_parser
    synopsis = readme_synopsis()
    assert set(synopsis) == set(COMMANDS)
    for command in COMMANDS:
        parser = build_parser([command])
        sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
        options = {o for action in sub.choices[command]._actions for o in action.option_strings
                   if o.startswith("--") and o != "--help"}
        assert synopsis[command] == options, command
        # every choice of --model and --kind is named in the README synopsis or text
        for action in sub.choices[command]._actions:
            if action.option_strings and action.option_strings[0] in ("--model", "--kind"):
                text = (ROOT / "README.md").read_text()
                assert all(choice in text for choice in action.choices)
