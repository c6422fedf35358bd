"""Sweeps over a manifest: one folder per ensemble, combined tables keyed by
the labels, failures recorded and not fatal, resume, no half-written folder,
the same tables from local processes and from a dask.distributed
LocalCluster, and the infinite-volume limit per group checked against closed
forms (Gradshteyn & Ryzhik 3.896.4 and DLMF 10.32.1; see test_volumes.py)."""
import csv
import io
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from test_volumes import exact_gaussian_sites, gaussian_sites_density, rotor_factor

ROOT = Path(__file__).resolve().parent.parent
VOLUMES = (8, 16, 32)
MU = "0:2:11"


def signfree(*args, cwd):
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(ROOT)] + ([os.environ["PYTHONPATH"]] if os.environ.get("PYTHONPATH") else [])))
    return subprocess.run([sys.executable, "-m", "signfree", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=600, env=env)


def signfree_here(*args, cwd, capsys):
    """The command in this process (for quick error paths): (status, stdout, stderr)."""
    from signfree.cli import main
    here = os.getcwd()
    os.chdir(cwd)
    try:
        status = main([str(a) for a in args])
    finally:
        os.chdir(here)
    out, err = capsys.readouterr()
    return status, out, err


def write_density(path, volume, tau2=0.0):
    d = gaussian_sites_density(volume, tau2)
    with open(path, "w") as f:
        f.write(f"# kind: log_density\n# volume: {volume}\nq,log_density,log_density_err\n")
        for q, y in zip(d.q, d.value):
            f.write(f"{float(q)!r},{float(y)!r},1e-10\n")
    return path


def read_csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """Two groups (label tau2 = 0 and 40) at V = 8, 16, 32, plus a file at
    V = 64 in the second group that cannot be read."""
    base = tmp_path_factory.mktemp("study")
    lines = ["# Gaussian sites plus one rotor", "file,volume,tau2"]
    for tau2 in (0, 40):
        for v in VOLUMES:
            write_density(base / f"t{tau2}_V{v}.csv", v, tau2)
            lines.append(f"t{tau2}_V{v}.csv,{v},{tau2}")
    (base / "broken.csv").write_text("# kind: log_density\nq,log_density\n0,1\n1,oops\n")
    lines.append("broken.csv,64,40")
    (base / "manifest.csv").write_text("\n".join(lines) + "\n")
    return base


def check_limit_against_exact(rows, tau2):
    """Every ok row of infinite_volume.csv holds sigma^2 mu^2 / 2 (the V -> inf
    limit of exact_gaussian_sites, GR 3.896.4) within its total error."""
    ok = 0
    for r in rows:
        if r["status"] == "ok":
            exact = exact_gaussian_sites(r["mu"], float("inf"), tau2)
            assert abs(float(r["delta_f"]) - exact) <= float(r["total_err"]), r
            ok += 1
    return ok


@pytest.fixture(scope="module")
def swept(study, tmp_path_factory):
    """The study swept once on two local processes: (output folder, the run)."""
    out = tmp_path_factory.mktemp("swept") / "out"
    res = signfree("sweep", study / "manifest.csv", "--mu", MU, "--out", out, "--jobs", "2",
                   cwd=study)
    return out, res


def test_a_sweep_records_failures_resumes_and_keys_its_tables_by_the_labels(study, swept,
                                                                            tmp_path):
    first, res = swept
    out = tmp_path / "out"
    shutil.copytree(first, out)
    assert res.returncode == 1, res.stderr        # one ensemble failed; the sweep finished
    assert "tau2=40_V=64: FAILED" in res.stderr and "7/7 done" not in res.stderr
    assert "failed: tau2=40_V=64: " in res.stdout and "broken.csv:4:2" in res.stdout
    ensembles = read_csv(out / "ensembles.csv")
    assert [e["outcome"] for e in ensembles] == ["done"] * 6 + ["failed"]
    assert ensembles[-1]["failure"].startswith(str(study / "broken.csv") + ":4:2")
    table = read_csv(out / "sweep.csv")
    assert len(table) == 6 * 11 + 1
    assert [r["tau2"] for r in table[:11]] == ["0"] * 11 and table[-1]["mu"] == ""
    assert table[-1]["outcome"] == "failed" and table[-1]["volume"] == "64"
    limit = read_csv(out / "infinite_volume.csv")
    zero = [r for r in limit if r["tau2"] == "0"]
    forty = [r for r in limit if r["tau2"] == "40"]
    assert len(zero) == len(forty) == 11
    assert check_limit_against_exact(zero, 0.0) >= 5
    # the group whose V = 64 failed says so on every row
    assert all(r["status"] == "volume_missing" and "V = 64" in r["reason"] for r in forty)
    assert sorted(p.name for p in (out / "ensembles").iterdir()) == sorted(
        f"tau2={t}_V={v}" for t in (0, 40) for v in VOLUMES)
    stamps = {p: p.stat().st_mtime_ns for p in (out / "ensembles").glob("*/summary.json")}

    # resume: nothing finished is analysed again; the failed one is retried
    res = signfree("sweep", study / "manifest.csv", "--mu", MU, "--out", out, "--jobs", "2",
                   cwd=study)
    assert res.returncode == 1
    assert "6 from an earlier run" in res.stdout
    assert {p: p.stat().st_mtime_ns for p in stamps} == stamps
    assert read_csv(out / "sweep.csv") == table

    # repaired input: only it runs, and the group gets its fourth volume
    write_density(study / "broken.csv", 64, 40.0)
    try:
        res = signfree("sweep", study / "manifest.csv", "--mu", MU, "--out", out, "--quiet",
                       cwd=study)
    finally:
        (study / "broken.csv").write_text("# kind: log_density\nq,log_density\n0,1\n1,oops\n")
    assert res.returncode == 0, res.stderr
    assert res.stderr == ""
    assert {p: p.stat().st_mtime_ns for p in stamps} == stamps
    forty = [r for r in read_csv(out / "infinite_volume.csv") if r["tau2"] == "40"]
    assert check_limit_against_exact(forty, 40.0) >= 4
    assert all(r["status"] != "volume_missing" for r in forty)
    page = (out / "report.html").read_text()
    assert page.count('src="data:image/png;base64,') == 2 and "tau2 = 40" in page
    assert "http" not in page and "<script" not in page     # self-contained, offline


def test_the_combined_table_reads_into_pandas(swept):
    pd = pytest.importorskip("pandas", reason="pandas is an optional extra")
    out, res = swept
    assert res.returncode == 1, res.stderr
    frame = pd.read_csv(out / "sweep.csv")
    done = frame[frame["outcome"] == "done"].set_index(["tau2", "volume", "mu"])
    assert done.index.is_unique and len(done) == 66
    # Delta f at V = 8 from the combined table against the closed form (GR 3.896.4)
    row = done.loc[(0, 8, 1.0)]
    assert abs(row["delta_f"] - exact_gaussian_sites(1.0, 8)) < 1e-6
    limit = pd.read_csv(out / "infinite_volume.csv").set_index(["tau2", "mu"])
    assert limit.index.is_unique


def test_an_interrupted_sweep_leaves_complete_folders_only(study, tmp_path):
    from signfree.report.sweep import SweepInterrupted, run_sweep

    class StopAfterOne(io.StringIO):
        def write(self, text):
            if "done" in text:
                raise KeyboardInterrupt
            return super().write(text)

    out = tmp_path / "out"
    with pytest.raises(SweepInterrupted) as info:
        run_sweep(study / "manifest.csv", MU, out, progress=StopAfterOne())
    assert info.value.done == 1
    folders = list((out / "ensembles").iterdir())
    assert [p.name for p in folders] == ["tau2=0_V=8"]
    assert {p.name for p in folders[0].iterdir()} == {"results.csv", "summary.json",
                                                      "delta_f.csv"}
    assert not (out / "sweep.csv").exists()
    # a run killed while assembling a folder leaves it under a temporary name
    stale = out / "ensembles" / ".tau2=0_V=16.x1y2z3"
    stale.mkdir()
    (stale / "results.csv").write_text("mu,avg\n0,")
    result = run_sweep(study / "manifest.csv", MU, out)
    assert not stale.exists()
    assert result.outcomes["tau2=0_V=8"] == "skipped"
    assert list(result.outcomes.values()).count("done") == 5


def test_bad_manifests_give_one_line_and_write_nothing(tmp_path, capsys):
    cases = {
        "name,volume\na.csv,8\n": "1: missing required column 'file'",
        "file,volume\na.csv,eight\n": "2:2: volume 'eight' is not a number",
        "file,volume\na.csv,-8\n": "2:2: volume -8 is not a positive number",
        "file,beta\na.csv,2\nb.csv,2\n": "3: same labels and volume as line 2",
        "file,status\na.csv,2\n": "1:2: 'status' is a column of the combined tables",
        "file,kind\na.csv,slope\n": "2:2: unknown kind 'slope'",
        "# nothing\n": "empty manifest",
        "file,beta\na.csv,2,3\n": "2: expected 2 fields as in the header, found 3",
    }
    for text, message in cases.items():
        (tmp_path / "m.csv").write_text(text)
        status, _, err = signfree_here("sweep", "m.csv", "--mu", MU, "--out", "out",
                                       cwd=tmp_path, capsys=capsys)
        assert status == 2, text
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("signfree: m.csv")
        assert message in lines[0], (text, lines[0])
        assert not (tmp_path / "out").exists()


def test_a_folder_that_is_not_this_sweeps_is_left_alone(study, tmp_path, capsys):
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me")
    status, _, err = signfree_here("sweep", study / "manifest.csv", "--mu", MU, "--out",
                                   tmp_path / "mine", cwd=tmp_path, capsys=capsys)
    assert status == 2 and "is not a sweep folder" in err
    assert sorted(p.name for p in (tmp_path / "mine").iterdir()) == ["notes.txt"]
    (tmp_path / "m.csv").write_text(f"file,volume\n{study / 't0_V8.csv'},8\n")
    status, _, err = signfree_here("sweep", "m.csv", "--mu", "0,1", "--out", "s", "--quiet",
                                   "--jobs", "1", cwd=tmp_path, capsys=capsys)
    assert status == 0, err
    status, _, err = signfree_here("sweep", "m.csv", "--mu", "0,2", "--out", "s",
                                   cwd=tmp_path, capsys=capsys)
    assert status == 2 and "other options (mu)" in err


def test_a_scheduler_without_dask_is_a_clear_error(monkeypatch, study, tmp_path):
    from signfree.report.sweep import run_sweep
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(ValueError, match=r"signfree\[cluster\]"):
        run_sweep(study / "manifest.csv", MU, tmp_path / "out", scheduler="tcp://127.0.0.1:1")
    assert not (tmp_path / "out").exists()


def test_progress_counts_and_time_left(monkeypatch):
    # time left = waiting x elapsed / finished (common practice)
    from signfree.report import sweep
    clock = [1000.0]
    monkeypatch.setattr(sweep.time, "time", lambda: clock[0])
    stream = io.StringIO()
    p = sweep.SweepProgress(total=12, skipped=2, stream=stream)
    p.running = lambda: 3
    assert p.line() == ("sweep: 2/12 done (2 from before), 0 failed, 3 running; "
                        "0 s elapsed, time left not known yet")
    clock[0] += 60
    p.finished("a", True)
    clock[0] += 60
    p.finished("b", False, "bad file")
    # 8 waiting at 2 per 120 s: 480 s
    assert p.line().endswith("3/12 done (2 from before), 1 failed, 3 running; about 8 min left")
    assert stream.getvalue().splitlines()[1].startswith("b: FAILED (bad file); sweep: ")


# ---------------------------------------------------------------------------
# the rotor study: three volumes, two couplings, locally and on a LocalCluster

ROTORS = ROOT / "data" / "volumes" / "manifest.csv"


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed", reason="dask.distributed is the "
                                      "optional extra signfree[cluster]")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as c:
        yield c


def test_rotor_study_locally_and_on_a_local_cluster(cluster, tmp_path):
    # DLMF 10.32.1: independent rotors have Delta f(mu) = -ln(I0(sqrt(b^2 - mu^2))/I0(b))
    # at every V, so the limit must hold it within its total error
    spec = "0:1.2:13"
    local = signfree("sweep", ROTORS, "--mu", spec, "--out", tmp_path / "local", "--jobs",
                     "2", "--quiet", cwd=tmp_path)
    assert local.returncode == 0, local.stderr
    remote = signfree("sweep", ROTORS, "--mu", spec, "--out", tmp_path / "cluster",
                      "--scheduler", cluster.scheduler_address, "--quiet", cwd=tmp_path)
    assert remote.returncode == 0, remote.stderr
    for name in ("sweep.csv", "ensembles.csv", "per_volume.csv", "infinite_volume.csv"):
        assert (tmp_path / "local" / name).read_bytes() == \
            (tmp_path / "cluster" / name).read_bytes(), name
    rows = read_csv(tmp_path / "local" / "infinite_volume.csv")
    for b in ("0.5", "1"):
        group = [r for r in rows if r["b"] == b]
        assert len(group) == 13
        ok = [r for r in group if r["status"] == "ok"]
        assert len(ok) >= 6, [(r["mu"], r["status"], r["reason"]) for r in group]
        for r in ok:
            exact = rotor_factor(r["mu"], float(b))
            assert abs(float(r["delta_f"]) - exact) <= float(r["total_err"]), r
        # past the largest volume's horizon no row is ok, and the reason says so
        for r in group[group.index(ok[-1]) + 1:]:
            assert r["status"] != "ok" and r["reason"]
    for name in ("fig_volumes_b=0.5.png", "fig_volumes_b=1.pdf", "report.html"):
        assert (tmp_path / "local" / name).stat().st_size > 1000


def test_the_same_sweep_through_the_python_api_on_the_cluster(cluster, study, tmp_path):
    # a dask Client is an executor: its futures interface matches concurrent.futures
    from distributed import Client

    from signfree.report.sweep import run_sweep
    local = run_sweep(study / "manifest.csv", MU, tmp_path / "local", jobs=1)
    with Client(cluster.scheduler_address) as client:
        remote = run_sweep(study / "manifest.csv", MU, tmp_path / "remote", executor=client)
    assert remote.outcomes == local.outcomes and remote.failed == ["tau2=40_V=64"]
    for name in ("sweep.csv", "ensembles.csv", "per_volume.csv", "infinite_volume.csv"):
        assert (tmp_path / "local" / name).read_bytes() == \
            (tmp_path / "remote" / name).read_bytes(), name


def test_volumes_command_takes_inputs_at_several_volumes(study, tmp_path):
    # exact limit sigma^2 mu^2/2 (GR 3.896.4); the inputs carry '# volume:' lines
    files = [study / f"t0_V{v}.csv" for v in VOLUMES]
    res = signfree("volumes", *files, "--mu", MU, "--out", "lim", "--jobs", "1", "--quiet",
                   cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert "infinite-volume limit from V = 8, 16, 32" in res.stdout
    rows = read_csv(tmp_path / "lim" / "infinite_volume.csv")
    assert check_limit_against_exact(rows, 0.0) >= 5
    assert sorted(p.name for p in (tmp_path / "lim" / "ensembles").iterdir()) == \
        ["V=16", "V=32", "V=8"]
    assert (tmp_path / "lim" / "fig_volumes.png").stat().st_size > 1000
    # --volumes overrides the metadata: the same files read as V = 80, 160, 320 give
    # Delta f ten times smaller at every volume, so the limit is a tenth
    res = signfree("volumes", *files, "--volumes", "80,160,320", "--mu", "1", "--out",
                   "tenth", "--quiet", "--volume-order", "1", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    row = read_csv(tmp_path / "tenth" / "infinite_volume.csv")[0]
    assert abs(float(row["delta_f"]) - 0.05) <= float(row["total_err"]) and row["order"] == "1"


def test_volumes_command_refuses_bad_inputs_before_writing(study, tmp_path, capsys):
    good = [study / f"t0_V{v}.csv" for v in VOLUMES[:2]]
    nov = tmp_path / "novolume.csv"
    nov.write_text("# kind: log_density\nq,log_density\n-1,-1\n0,0\n1,-1\n")
    cases = [
        ((*good, study / "broken.csv"), "broken.csv:4:2: "),
        ((*good, nov), "novolume.csv: no volume"),
        ((*good,), None),                           # fine: two volumes
        ((good[0], good[0]), "an input is given twice"),
        ((good[0],), "at least two inputs"),
    ]
    for k, (inputs, message) in enumerate(cases):
        status, _, err = signfree_here("volumes", *inputs, "--mu", "0,1", "--out", f"o{k}",
                                       "--quiet", "--jobs", "1", cwd=tmp_path, capsys=capsys)
        if message is None:
            assert status == 0, err
            continue
        assert status == 2 and message in err, err
        assert len(err.strip().splitlines()) == 1
        assert not (tmp_path / f"o{k}").exists()
    status, _, err = signfree_here("volumes", *good, "--volumes", "8", "--mu", "0,1", "--out",
                                   "x", cwd=tmp_path, capsys=capsys)
    assert status == 2 and "1 value(s) for 2 input(s)" in err
