"""Zeros of Z(mu) in the complex mu plane: densities whose transforms have
known zeros, the exact rotor phase factor, and the ``zeros`` command."""
import argparse
import csv
import hashlib
import json
import math

import mpmath
import numpy as np
import pytest
from numpy.polynomial import chebyshev as C

from signfree.models.chebyshev import ChebyshevModel
from signfree.scenarios import rotor_log_density, rotor_phase_factor
from signfree.analysis.zeros import (Zero, ZeroResult, count_zeros, find_zeros, partners,
                                     unpaired, with_partners)
from signfree.cli.zeros import add_parser as add_zeros_parser, cmd_zeros
from signfree.engine.complex_mu import phase_factor

A = 0.5          # ln rho = ln cosh(a q) - q^2 / 2
L = 8.5          # data range [-L, L]: rho(L) / rho(0) ~ e^-32
DEGREE = 90


def interpolate(f, half_range, degree):
    """Chebyshev interpolant of f at the degree + 1 Chebyshev points, as an
    even model (f is even; the odd coefficients are rounding only)."""
    n = degree + 1
    x = np.cos(np.pi * (np.arange(n) + 0.5) / n)
    coef = C.chebfit(x, f(half_range * x), degree)
    coef[1::2] = 0.0
    return ChebyshevModel(coef=coef, domain=(-half_range, half_range), parity="even")


def log_cosh(q):
    return np.logaddexp(A * q, -A * q) - q ** 2 / 2


def log_double(q):
    return np.log1p(np.exp(-2 * A * A) * np.cosh(2 * A * q)) - q ** 2 / 2


def model_error(model, f):
    """The largest deviation of the model from ln rho on a fine grid, plus
    the relative mass beyond the range, 2 rho(L) / (|p'(L)| Z(0)): what the
    model's Z(mu)/Z(0) can differ by on the real axis (|dZ| <= max|eps| Z(0)
    for ln rho off by eps; common practice)."""
    q = np.linspace(-L, L, 4001)
    eps = float(np.max(np.abs(model.log_density(q) - f(q))))
    z0 = np.trapezoid(np.exp(f(q)), q)
    tail = 2 * math.exp(f(L)) / abs(float(model.derivative(L))) / z0
    return eps + tail


@pytest.fixture(scope="module")
def cosh_model():
    return interpolate(log_cosh, L, DEGREE)


# Gradshteyn & Ryzhik 3.896.4 with a shifted argument:
# Int cosh(a q) e^{-q^2/2} e^{i mu q} dq = sqrt(2 pi) e^{(a^2 - mu^2)/2} cos(a mu),
# so Z(mu)/Z(0) = e^{-mu^2/2} cos(a mu): simple real zeros at
# mu = (k + 1/2) pi / a, none elsewhere. A zero moves by |dZ| / |Z'|, and
# |Z'(pi/(2a))| / Z(0) = a e^{-mu_1^2/2}: that sets the tolerance.
def test_simple_zeros_of_the_cosh_density(cosh_model):
    mu1 = math.pi / (2 * A)
    tol = 10 * model_error(cosh_model, log_cosh) / (A * math.exp(-mu1 ** 2 / 2))
    assert tol < 1e-8
    res = find_zeros(cosh_model, "-4:4,-1:1", digits=12)
    assert res.count == 2 and len(res.zeros) == 2
    for z, sign in zip(res.zeros if res.zeros[0].re < 0 else res.zeros[::-1], (-1, 1)):
        assert z.multiplicity == 1 and z.converged
        assert abs(z.re - sign * mu1) < tol
        assert abs(z.im) <= z.err + 1e-20          # Z is real on the real axis
        assert z.err < 1e-11
    assert abs(res.radius - mu1) < tol
    # the box is too flat to hold the disc |mu| < pi/2a: the radius is an upper bound
    assert res.note and "does not contain the disc" in res.note
    assert res.radius_lower_bound == 1
    rows = res.records()
    assert list(rows[0]) == list(ZeroResult.COLUMNS)
    assert rows[0]["im"] == "0" and rows[0]["status"] == "not assessed"
    # the ends (rho(L)/rho(0) ~ e^-32) cannot move these zeros visibly
    assert not any(z.edge_limited for z in res.zeros)
    assert all(z.edge_shift < tol for z in res.zeros)


# the same closed form: the square |Re|, |Im| <= 3.5 contains the disc of
# radius pi, so the radius is certain; even density: zeros mirror in both axes
def test_disc_inside_the_box_and_symmetry(cosh_model):
    res = find_zeros(cosh_model, "-3.5:3.5,-3.5:3.5", digits=10)
    assert res.count == 2 and res.note is None
    assert res.radius == res.radius_lower_bound
    assert abs(res.radius - math.pi) < 1e-8
    assert unpaired(res.zeros, "-3.5:3.5,-3.5:3.5", "even") == []
    half = [z for z in res.zeros if z.re > 0]
    assert len(with_partners(half, "even")) == 2
    p = partners(Zero(re=mpmath.mpf(1), im=mpmath.mpf(2), err=mpmath.mpf(0)), "even")
    assert {(float(z.re), float(z.im)) for z in p} == {(-1, 2), (-1, -2), (1, -2)}
    assert count_zeros(cosh_model, "-2:2,-1:1")[0] == 0


# common practice (inverse of the Gaussian shift rule, GR 3.896.4):
# rho = phi(q) (1/2 + e^{-2a^2} cosh(2 a q) / 2) has Z(mu)/Z(0) =
# e^{-mu^2/2} cos^2(a mu): double zeros at mu = +-pi/(2a). A perturbation dZ
# splits a double zero into two at distance sqrt(|dZ| / (Z''/2)) with
# Z''/2 = a^2 e^{-mu_1^2/2}: the pair (or a cluster of multiplicity 2) must
# lie within that of the exact point.
def test_double_zeros_split_at_most_as_the_model_error_allows():
    model = interpolate(log_double, L, DEGREE)
    mu1 = math.pi / (2 * A)
    r = math.sqrt(10 * model_error(model, log_double) / (A * A * math.exp(-mu1 ** 2 / 2)))
    assert r < 1e-4
    res = find_zeros(model, "-4:4,-1:1", digits=10)
    assert res.count == 4
    for sign in (-1, 1):
        near = [z for z in res.zeros if abs(z.value - sign * mu1) < r]
        assert sum(z.multiplicity for z in near) == 2
    assert sum(z.multiplicity for z in res.zeros) == 4


# Gradshteyn & Ryzhik 3.896.4: the Gaussian's transform exp(-mu^2/2) has no
# zero at all; cut at +-4 sigma (rho(L)/rho(0) = e^-8) the model's Z gets
# zeros where the endpoint terms rival e^{-mu^2/2}, |mu| ~ 4: every one of
# them must be flagged as a possible artefact of the range, and the disc
# |mu| < 2, where e^{-mu^2/2} >> e^-8, must stay free of zeros
def test_zeros_of_a_cut_gaussian_are_flagged_as_range_artefacts():
    half = 4.0
    c = -(half ** 2) / 4
    model = ChebyshevModel(coef=np.array([c, 0.0, c]), domain=(-half, half), parity="even")
    res = find_zeros(model, "2:8,-2:2", digits=8)
    assert res.count >= 4 and len(res.zeros) == res.count
    assert all(z.edge_limited for z in res.zeros)
    assert any("artefacts of the finite range" in n for n in res.notes)
    assert count_zeros(model, "-2:2,-2:2")[0] == 0


V_ROT, B_ROT = 21, 0.5
J01 = 2.404825557695773                       # DLMF Table 10.21
MU0 = math.sqrt(B_ROT ** 2 + J01 ** 2)


@pytest.fixture(scope="module")
def rotor_model():
    """ln rho of V = 21 independent rotors (b = 0.5) from the exact density
    (signfree.scenarios, 10 digits), interpolated at 32 Chebyshev points on
    [-0.8 V, 0.8 V] (rho is even: 16 evaluations)."""
    n, half = 32, 0.8 * V_ROT
    x = np.cos(np.pi * (np.arange(n) + 0.5) / n)
    x[n // 2:] = -x[: n // 2][::-1]
    vals = [float(rotor_log_density(xi * half, B_ROT, V_ROT, dps=10)[0]) for xi in x[: n // 2]]
    coef = C.chebfit(x, np.array(vals + vals[::-1]), n - 1)
    coef[1::2] = 0.0
    return ChebyshevModel(coef=coef, domain=(-half, half), parity="even")


# DLMF 10.32.1 and 10.27.6: the exact phase factor is
# (J0(sqrt(mu^2 - b^2)) / I0(b))^V, a V-fold zero at mu0 = sqrt(b^2 + j01^2).
# Near it |Z| ~ (c |mu - mu0|)^V with c = J1(j01) mu0 / (j01 I0(b)), so a
# model that reproduces Z only to |dZ| = delta (measured here on the real
# axis) can place its zeros anywhere in |mu - mu0| <= delta^(1/V) / c (25%
# allowed for the curvature of J0): for V = 21 and delta ~ 1e-7 that is
# ~0.9 -- the V-fold zero is resolved to that radius and no better. At each
# zero of the model, |Z_exact| = |dZ|, which must be of the measured size.
def test_rotor_zero_resolved_as_far_as_the_model_allows(rotor_model):
    grid = np.linspace(0.2, 3.2, 16)
    delta = max(abs(phase_factor(rotor_model, m, digits=6) - rotor_phase_factor(m, B_ROT, V_ROT))
                for m in grid)
    c = float(mpmath.besselj(1, J01)) * MU0 / (J01 * float(mpmath.besseli(0, B_ROT)))
    reach = 1.25 * float(delta) ** (1 / V_ROT) / c
    assert 1e-9 < delta < 1e-6 and reach < 1.2
    res = find_zeros(rotor_model, "1.2:3.2,-0.4:0.4", digits=8)
    assert res.count >= 1 and sum(z.multiplicity for z in res.zeros) == res.count
    nearest = min(res.zeros, key=lambda z: abs(z.value))
    assert abs(nearest.value - MU0) <= reach
    assert abs(nearest.value) > MU0 - reach
    with mpmath.workdps(30):
        for z in res.zeros:
            mu = z.value
            exact = (mpmath.besselj(0, mpmath.sqrt(mu ** 2 - B_ROT ** 2))
                     / mpmath.besseli(0, B_ROT)) ** V_ROT
            assert abs(exact) <= 30 * delta
    # no zero where the model resolves Z: the disc |mu| < 1.2 (|Z| >= 1e-4 there)
    assert count_zeros(rotor_model, "-1.2:1.2,-0.4:0.4")[0] == 0


# ------------------------------------------------------------ command line

def cosh_file(path, n=161, err=1e-9):
    q = np.linspace(-L, L, n)
    with open(path, "w") as f:
        f.write("# kind: log_density\nq,log_density,log_density_err\n")
        for qi, yi in zip(q, log_cosh(q)):
            f.write(f"{float(qi)!r},{float(yi)!r},{err!r}\n")
    return path


def run(argv):
    parser = argparse.ArgumentParser(prog="signfree")
    add_zeros_parser(parser.add_subparsers(dest="command"))
    return cmd_zeros(parser.parse_args(argv))


# Gradshteyn & Ryzhik 3.896.4 (shifted), as above: zeros at +-pi
def test_zeros_command_writes_the_table_and_summary(tmp_path, capsys):
    src = cosh_file(tmp_path / "c.csv")
    out = tmp_path / "z"
    assert run(["zeros", str(src), "--box=-4:4,-1:1", "--out", str(out),
                "--digits", "8"]) == 0
    with open(out / "zeros.csv") as f:
        rows = list(csv.DictReader(f))
    assert list(rows[0]) == list(ZeroResult.COLUMNS)
    assert len(rows) == 2 and all(r["status"] == "stable" for r in rows)
    assert sorted(round(float(r["re"]), 6) for r in rows) == [-3.141593, 3.141593]
    # the printed digits are those the total error supports, and the
    # exact zeros +-pi lie within it
    for r in rows:
        assert abs(abs(float(r["re"])) - math.pi) <= float(r["total_err"]) + 1e-8
    summary = json.loads((out / "summary.json").read_text())
    assert summary["count"] == 2 and float(summary["radius"]) == pytest.approx(math.pi, rel=1e-7)
    assert summary["note"] and summary["model"].startswith("chebyshev:")
    assert summary["input"]["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()
    printed = capsys.readouterr().out
    assert "2 zero(s) by the argument principle" in printed and str(out) in printed


@pytest.mark.parametrize("text, args, word", [
    ("q,log_density\n0,1\n1,x\n2,3\n", ["--box=-1:1,-1:1"], "c.csv:3:2:"),
    ("", ["--box=-1:1,-1:1"], "empty file"),
    (None, ["--box", "1:-1,0:1"], "--box"),
    (None, ["--box", "a:b"], "--box"),
    (None, ["--box=-1:1,-1:1", "--digits", "0"], "--digits"),
])
def test_zeros_command_bad_input_exit_2_nothing_written(tmp_path, capsys, text, args, word):
    src = tmp_path / "c.csv"
    if text is None:
        cosh_file(src, n=41)
    else:
        src.write_text(text)
    out = tmp_path / "z"
    assert run(["zeros", str(src), "--out", str(out), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("signfree: ") and word in err[0]
    assert not out.exists()
