"""The one-dimensional Ising chain in an imaginary field, and zeros in the
fugacity plane, through the command line.

Sources:
- Baxter, Exactly Solved Models in Statistical Mechanics, ch. 2: a periodic
  chain of N spins, coupling K, field h has Z = lambda_+^N + lambda_-^N with
  lambda_-+ = e^K cosh h -+ sqrt(e^{2K} sinh^2 h + e^{-2K}); for h = i theta,
  cosh -> cos, sinh^2 -> -sin^2, and P(M) are the coefficients of x^M in
  Tr T(x)^N, T(x) = [[e^K x, e^-K], [e^-K, e^K / x]].
- Lee & Yang, Phys. Rev. 87, 410 (1952): the zeros of a ferromagnetic Ising
  partition function in the fugacity z = exp(2 i theta) lie on |z| = 1. Where
  e^{2K} sin^2 theta > e^{-2K} the eigenvalues are complex conjugates
  r exp(+-i phi), so Z = 2 r^N cos(N phi) vanishes at N phi = pi/2 + k pi.
- DLMF 10.35.1 (Skellam, as in test_lattice.py): exp(lam (cos theta - 1)) has
  no zeros at all, so every root of the truncated sum is an artefact.
- A 4 x 4 Ising model by enumeration of all its configurations (common practice).
"""
import csv
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import mpmath
import numpy as np
import pytest

from signfree.cli import main as run

ROOT = Path(__file__).resolve().parent.parent
N, K = 16, 0.5


def chain_pm(n, k, dps=40):
    """P(M) of a periodic chain, exact: the transfer-matrix polynomial."""
    with mpmath.workdps(dps):
        ek, emk = mpmath.exp(k), mpmath.exp(-k)
        T = [[{1: ek}, {0: emk}], [{0: emk}, {-1: ek}]]

        def mul(A, B):
            C = [[{}, {}], [{}, {}]]
            for i in range(2):
                for j in range(2):
                    for m in range(2):
                        for p, a in A[i][m].items():
                            for q, b in B[m][j].items():
                                C[i][j][p + q] = C[i][j].get(p + q, 0) + a * b
            return C
        R = T
        for _ in range(n - 1):
            R = mul(R, T)
        out = {}
        for i in range(2):
            for p, a in R[i][i].items():
                out[p] = out.get(p, 0) + a
        return dict(sorted(out.items()))


def chain_exact(n, k, theta, dps=40):
    # Baxter ch. 2 with h = i theta
    with mpmath.workdps(dps):
        t = mpmath.mpf(theta)
        c = mpmath.exp(k) * mpmath.cos(t)
        r = mpmath.sqrt(mpmath.exp(-2 * k) - mpmath.exp(2 * k) * mpmath.sin(t) ** 2 + 0j)
        z0 = (2 * mpmath.cosh(k)) ** n + (2 * mpmath.sinh(k)) ** n
        return (((c + r) ** n + (c - r) ** n) / z0).real


def chain_zeros(n, k):
    # Lee-Yang: N phi(theta) = pi/2 + j pi on the arc where the eigenvalues are complex
    def phi(t):
        return mpmath.atan2(mpmath.sqrt(mpmath.exp(2 * k) * mpmath.sin(t) ** 2
                                        - mpmath.exp(-2 * k)), mpmath.exp(k) * mpmath.cos(t))
    lo = mpmath.asin(mpmath.exp(-2 * k)) + mpmath.mpf(10) ** -12
    hi = mpmath.pi - lo
    return [mpmath.findroot(lambda t: n * phi(t) - (mpmath.pi / 2 + j * mpmath.pi), (lo, hi),
                            solver="anderson") for j in range(n)]


def chain_samples(n, k, sweeps, chains, seed):
    """Metropolis on the chain at h = 0 (the phase-quenched ensemble of the
    imaginary-field model), checkerboard updates of many chains at once;
    M after every sweep, shape (chains, sweeps)."""
    rng = np.random.default_rng(seed)
    s = rng.choice([-1, 1], size=(chains, n))
    out = np.empty((chains, sweeps), dtype=np.int64)
    for t in range(sweeps + 200):
        for sites in (np.arange(0, n, 2), np.arange(1, n, 2)):
            field = s[:, (sites - 1) % n] + s[:, (sites + 1) % n]
            flip = rng.random((chains, len(sites))) < np.exp(-2 * k * s[:, sites] * field)
            s[:, sites] = np.where(flip, -s[:, sites], s[:, sites])
        if t >= 200:
            out[:, t - 200] = s.sum(axis=1)
    return out


@pytest.fixture(scope="module")
def chain_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("chain") / "chain.csv"
    with open(path, "w") as f:
        f.write(f"# kind: log_density\n# step: 2\n# range: complete\n# volume: {N}\n"
                "q,log_density\n")
        for m, p in chain_pm(N, K).items():
            f.write(f"{m},{float(mpmath.log(p))!r}\n")
    return path


def results(folder):
    with open(Path(folder) / "results.csv") as f:
        return list(csv.DictReader(f))


def test_chain_from_exact_p_of_m_through_run(chain_file, tmp_path, capsys):
    # Baxter ch. 2: every row ok and right to its printed digits, theta = pi
    # included (the period is pi for a step of 2), sign changes at the zeros
    out = tmp_path / "out"
    assert run(["run", str(chain_file), "--mu", "0:3.14159265358979:21", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "sum: exact over 17 lattice points of step 2" in printed and "theta: chi_t" in printed
    rows = results(out)
    for row in rows:
        exact = chain_exact(N, K, row["mu"])
        assert row["status"] == "ok"
        got = mpmath.mpf(row["avg_phase"])
        # results.csv keeps two guard digits past the last supported one
        digits = len(row["avg_phase"].split("e")[0].replace("-", "").replace(".", "").lstrip("0")) - 2
        assert digits >= 9
        assert abs(got - exact) <= 10 ** (-digits + 1) * abs(exact)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["route"] == "direct" and summary["lattice"]["complete_range"] is True
    assert summary["lattice"]["period"] == "2 pi / 2"
    zeros = [float(z) for z in chain_zeros(N, K)]
    assert summary["sign_changes"]
    for a, b in summary["sign_changes"]:
        assert any(a < z < b for z in zeros)
    # chi_t = <M^2>/N, the susceptibility per site: sum_r <s_0 s_r> = (1 + t^N ...)
    t = math.tanh(K)
    chi = (1 + t) / (1 - t) * (1 - t ** N) / (1 + t ** N)  # periodic chain, Baxter ch. 2
    assert summary["theta"]["chi_t"] == pytest.approx(chi, rel=1e-12)


def test_chain_zeros_lie_on_the_unit_circle(chain_file, tmp_path, capsys):
    # Lee & Yang 1952: |z| = 1; the roots match the exact zeros and the
    # argument-principle count of the box
    out = tmp_path / "z"
    assert run(["zeros", str(chain_file), "--box=0:3.2,-0.5:0.5", "--digits", "14",
                "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "16 zero(s) by the argument principle" in printed
    with open(out / "zeros.csv") as f:
        rows = list(csv.DictReader(f))
    assert list(rows[0]) == ["re", "im", "err", "z_re", "z_im", "z_abs", "noise_shift",
                             "edge_shift", "status"]
    exact = sorted(chain_zeros(N, K))
    assert len(rows) == len(exact) == 16
    for row, z in zip(rows, exact):
        err = float(row["err"])
        assert err < 1e-12 and row["status"] == "ok"
        assert abs(mpmath.mpf(row["re"]) - z) <= err + 1e-13  # 14 digits printed
        assert row["im"] == "0" and abs(float(row["z_abs"]) - 1) <= 1e-12
    summary = json.loads((out / "summary.json").read_text())
    assert summary["count"] == 16 and summary["polynomial_degree"] == 16


def test_chain_from_monte_carlo_samples(tmp_path):
    # Baxter ch. 2 against a phase-quenched (h = 0) Metropolis run: every ok
    # row within three standard errors plus its other errors, small theta
    # resolved, and the deep rows not claimed
    M = chain_samples(N, K, 3000, 24, seed=7)
    src = tmp_path / "mc.csv"
    with open(src, "w") as f:
        f.write(f"# kind: samples\n# volume: {N}\n# range: complete\nq,replica\n")
        for c in range(M.shape[0]):
            f.write("".join(f"{m},{c + 1}\n" for m in M[c]))
    out = tmp_path / "out"
    assert run(["run", str(src), "--mu", "0:3.14159265358979:21", "--out", str(out)]) == 0
    rows = results(out)
    for row in rows:
        exact = chain_exact(N, K, row["mu"])
        if row["status"] == "ok":
            value = mpmath.mpf(row["avg_phase"])
            stat = float(row["avg_phase_err"] or 0)
            total = stat + sum(float(row[c] or 0) for c in ("quad_err", "model_err", "edge_err"))
            assert abs(value - exact) <= 3 * stat + total
    assert [r["status"] for r in rows[:2]] == ["ok", "ok"]
    assert rows[-1]["status"] == "ok"  # theta = pi is theta = 0 again
    assert sum(r["status"] == "ok" for r in rows) < len(rows)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["lattice"]["source"] == "detected" and summary["lattice"]["step"] == "2"


def test_skellam_has_no_zeros_and_every_root_is_flagged(tmp_path, capsys):
    # DLMF 10.35.1: Z = exp(lam (cos theta - 1)) never vanishes; the cut-off
    # sum does, and the edge shift must say that those roots are artefacts
    lam, L = 2.0, 14
    src = tmp_path / "sk.csv"
    with open(src, "w") as f:
        f.write("# kind: log_density\n# charge: integer\nq,log_density,log_density_err\n")
        for q in range(-L, L + 1):
            v = mpmath.log(mpmath.besseli(q, lam)) - lam
            f.write(f"{q},{float(v)!r},1e-6\n")
    out = tmp_path / "z"
    assert run(["zeros", str(src), "--box=-3.2:3.2,-3:3", "--out", str(out)]) == 0
    with open(out / "zeros.csv") as f:
        rows = list(csv.DictReader(f))
    assert rows, "the truncated sum has roots in the box"
    assert all(r["status"] != "ok" for r in rows)
    assert "not supported by the data" in capsys.readouterr().out


def signfree(*args, cwd):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "signfree", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=300, env=env)


@pytest.mark.parametrize("text, args, word", [
    ("# kind: histogram\n# step: abc\nq,count\n0,5\n1,3\n2,1\n", [], "h.csv:2: metadata 'step'"),
    ("# kind: histogram\nq,count\n0,5\n1,3\n2,1\n", ["--step", "-1"], "--step"),
    ("# kind: histogram\nq,count\n0,5\n1,3\n2,1\n", ["--step", "2"], "lattice of step 2"),
    ("# kind: histogram\n# charge: integer\nq,count\n0,5\n1.5,3\n2,1\n", [],
     "h.csv:2: metadata 'charge'"),
    ("# kind: log_density\n# step: 1\nq,log_density\n0,0\n1,-1\n3,-4\n", ["--lattice-route",
                                                                         "direct"], "every one"),
])
def test_bad_lattice_input_gives_one_line_and_writes_nothing(tmp_path, text, args, word):
    (tmp_path / "h.csv").write_text(text)
    res = signfree("run", "h.csv", "--mu", "0:1:3", "--out", "out", *args, cwd=tmp_path)
    assert res.returncode == 2
    err = res.stderr.strip().splitlines()
    assert len(err) == 1 and word in err[0], res.stderr
    assert not (tmp_path / "out").exists()


def test_two_dimensional_ising_with_slow_tunnelling():
    # A 4 x 4 periodic Ising model at beta = 0.35, P(M) exact by enumeration
    # of its 65536 configurations (common practice), against a phase-quenched
    # Metropolis run of 16 short chains that tunnel rarely between +M and -M:
    # the errors must still hold (three standard errors plus the others) at
    # every theta up to pi, the period of a step-2 charge
    from signfree import analyse, parse_mu_spec
    from signfree.io.samples import Samples, density_from_samples
    L, beta = 4, 0.35
    idx = np.arange(L * L).reshape(L, L)
    right, down = np.roll(idx, -1, axis=1).ravel(), np.roll(idx, -1, axis=0).ravel()
    conf = ((np.arange(2 ** (L * L))[:, None] >> np.arange(L * L)) & 1) * 2 - 1
    energy = -(conf * conf[:, right]).sum(1) - (conf * conf[:, down]).sum(1)
    m = conf.sum(1)
    weight = np.exp(-beta * energy)
    ms = np.arange(-L * L, L * L + 1, 2)
    pm = np.array([weight[m == v].sum() for v in ms])

    # with this seed the chains' blocking analyses alone would claim an error
    # 13 times too small at some theta
    rng = np.random.default_rng(6)
    s = rng.choice([-1, 1], size=(16, L, L))
    chess = np.add.outer(np.arange(L), np.arange(L)) % 2
    series = []
    for t in range(2100):
        for parity in (0, 1):
            field = np.roll(s, 1, 1) + np.roll(s, -1, 1) + np.roll(s, 1, 2) + np.roll(s, -1, 2)
            flip = (rng.random(s.shape) < np.exp(-2 * beta * s * field)) & (chess == parity)
            s = np.where(flip, -s, s)
        if t >= 100:
            series.append(s.sum((1, 2)))
    series = np.array(series).T
    samples = Samples(q=series.ravel().astype(float),
                      replicas=np.repeat(np.arange(16), series.shape[1]),
                      metadata={"range": "complete"})
    density, _ = density_from_samples(samples)
    result = analyse(density, parse_mu_spec("0:3.14159265358979:21"), samples=samples)
    assert "jackknife over 16 chains" in result.table.info["statistical_errors"]
    for row in result.table.rows:
        t = float(row.mu)
        exact = float((pm * np.cos(t * ms)).sum() / pm.sum())
        if row.status == "ok":
            assert abs(complex(row.value) - exact) <= 3 * float(row.stat_err or 0) + \
                float(row.total_err)
    assert sum(r.status == "ok" for r in result.table.rows) >= 10
