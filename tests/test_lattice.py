"""Charges on a lattice: the exact periodic sum against closed forms.

Sources:
- DLMF 10.35.1, exp((z/2)(t + 1/t)) = sum_k t^k I_k(z): the Skellam
  distribution P(Q) = exp(-lam) I_Q(lam) has Z(theta)/Z(0) = exp(lam (cos theta - 1)),
  and its cumulants are kappa_2 = kappa_4 = lam, so b_2 = -1/12, the dilute
  instanton gas f(theta) = chi_t (1 - cos theta) (common practice).
- Poisson summation formula, DLMF 1.8(iv), with Gradshteyn & Ryzhik 3.896.4:
  sum_Q exp(-Q^2/(2 s^2) + i theta Q) / sum_Q exp(-Q^2/(2 s^2))
  = sum_k exp(-s^2 (theta + 2 pi k)^2 / 2) / sum_k exp(-s^2 (2 pi k)^2 / 2).
- mpmath sums at high precision as the reference for the engine's sums.
"""
from fractions import Fraction

import mpmath
import numpy as np
import pytest

from signfree import analyse, engine
from signfree.analysis.settings import Settings, parse_mu_spec
from signfree.density import Density
from signfree.engine.complex_mu import _frac
from signfree.errors import InputError
from signfree.io.reading import read_density
from signfree.io.samples import Samples, density_from_samples
from signfree.models.lattice import (Lattice, LatticeModel, integer_step, lattice_through,
                                     parse_step, written_resolution)

TWO_PI = "6.28318530717959"
PI = "3.14159265358979"


def skellam_log(lam, L, dps=40):
    """ln P(Q) = ln I_Q(lam) - lam for Q = -L..L, as mpmath numbers."""
    with mpmath.workdps(dps):
        return [mpmath.log(mpmath.besseli(q, lam)) - lam for q in range(-L, L + 1)]


def skellam_exact(lam, theta):
    # DLMF 10.35.1
    return mpmath.exp(lam * (mpmath.cos(mpmath.mpf(theta)) - 1))


def as_mpf(mu):
    return mpmath.mpf(mu.numerator) / mu.denominator


def write_log_density(path, charges, logs, header=""):
    with open(path, "w") as f:
        f.write("# kind: log_density\n" + header + "q,log_density\n")
        for q, v in zip(charges, logs):
            f.write(f"{q},{float(v)!r}\n")
    return path


# ------------------------------------------------------------ the engine

def test_exact_sum_of_skellam_weights_at_any_depth():
    # DLMF 10.35.1 with ln P exact to 150 digits (Fractions): the engine's sum
    # must reach every depth (Z(pi) = exp(-2 lam) = 1e-87) to the digits asked
    # for, and its quad_err must bound the actual error (up to the 1e-150 of
    # Z(0) by which the 150-digit ln P and the cut at |Q| = 400 miss)
    lam, L = 100, 400
    logs = tuple(_frac(v) for v in skellam_log(lam, L, dps=150))
    model = LatticeModel(lattice=Lattice(Fraction(1), Fraction(-L), 2 * L + 1), log_values=logs)
    mus = [Fraction(k, 8) for k in range(0, 51)] + [Fraction(314159265358979, 10 ** 14)]
    tr = engine.transform([model], mus, digits=15)
    assert all(tr.resolved)
    with mpmath.workdps(160):
        for k, mu in enumerate(tr.mus):
            exact = skellam_exact(lam, as_mpf(mu))
            got = mpmath.mpc(engine.to_mpf(tr.values[0][k].real), engine.to_mpf(tr.values[0][k].imag))
            err = abs(got - exact)
            assert err <= tr.quad_err[0][k] + mpmath.mpf(10) ** -145
            assert err <= exact * mpmath.mpf(10) ** -15
    assert -mpmath.log10(skellam_exact(lam, mus[-1])) > 86


def test_batch_product_and_horner_agree_with_mpmath_sums():
    # many rows go through one ball matrix product, few through Horner's rule;
    # both against plain mpmath sums of P_j exp(i theta Q_j) on a lattice of
    # step 2 through odd charges (Z(theta + pi) = -Z(theta))
    rng = np.random.default_rng(4)
    lattice = Lattice(Fraction(2), Fraction(-9), 10)
    rows = [tuple(Fraction(float(v)) for v in rng.normal(0, 2, 10)) for _ in range(6)]
    models = [LatticeModel(lattice=lattice, log_values=r) for r in rows]
    mus = [Fraction(k, 7) for k in range(-10, 30)]
    batch = engine.transform(models, mus, digits=14)
    single = engine.transform(models[:1], mus, digits=14)
    with mpmath.workdps(40):
        for r, row in enumerate(rows):
            w = [mpmath.exp(mpmath.mpf(v.numerator) / v.denominator) for v in row]
            q = [-9 + 2 * j for j in range(10)]
            for k, mu in enumerate(mus):
                t = as_mpf(mu)
                ref = sum(wj * mpmath.expj(t * qj) for wj, qj in zip(w, q)) / sum(w)
                got = batch.values[r][k]
                assert abs(mpmath.mpc(engine.to_mpf(got.real), engine.to_mpf(got.imag)) - ref) \
                    <= 1e-14 * abs(ref) + 1e-30
                if r == 0:
                    one = single.values[0][k]
                    assert abs(complex(one.real.mid(), one.imag.mid()) - complex(ref)) \
                        <= 1e-14 * abs(ref) + 1e-30
                # the period of a step-2 lattice through odd charges: Z(t + pi) = -Z(t)
                shifted = sum(wj * mpmath.expj((t + mpmath.pi) * qj) for wj, qj in zip(w, q))
                assert abs(shifted / sum(w) + ref) <= 1e-30


# ------------------------------------------------------------ the lattice

def test_parse_step_and_detection():
    # common practice: integer charges have the gcd of their differences as step
    assert parse_step("integer") == 1 and parse_step("2") == 2
    assert parse_step("1/3") == Fraction(1, 3) and parse_step("continuous") == "continuous"
    for bad in ("0", "-1", "abc", "nan"):
        with pytest.raises(ValueError, match="positive number"):
            parse_step(bad)
    assert integer_step([-4, 0, 2, 6]) == 2 and integer_step([-3, -1, 1, 5]) == 2
    assert integer_step([0, 1.5, 3]) is None
    third = lattice_through([-4 / 3, -1 / 3, 2 / 3, 5 / 3], Fraction(1, 3))
    assert third.start == Fraction(-4, 3) and third.count == 10
    assert lattice_through([0.0, 1.0, 2.5], Fraction(1)) is None
    odd = lattice_through([-3.0, 1.0, 3.0], Fraction(2))
    assert odd.start == -3 and odd.count == 4 and odd.index([1.0])[0] == 2


def test_written_resolution_follows_the_written_digits():
    # common practice: a decimal written to d places is known to half a unit
    # in its last place; fixed decimals and fixed significant digits
    fixed = np.array([-60.113, -2.0, -0.25, 0.0, -12.5])          # as from "%.3f"
    assert np.allclose(written_resolution(fixed), 5e-4)
    sig = np.array([float(f"{v:.6e}") for v in (-60.1131415, -0.123456789, -1234.56789)])
    res = written_resolution(sig)
    assert res[0] == pytest.approx(5e-6) and res[1] == pytest.approx(5e-8, rel=1e-6)
    assert res[2] == pytest.approx(5e-4)
    full = np.array([-60.11314159265358, -0.1234567890123456])
    assert np.all(written_resolution(full) < 1e-14)


# ------------------------------------------------------------ Skellam through the analysis

@pytest.mark.parametrize("lam, L", [(1.5, 12), (100.0, 260)])
def test_skellam_from_exact_log_p(tmp_path, lam, L):
    # DLMF 10.35.1; ln P stored as doubles: every ok row holds the exact value
    # within its total error, theta = pi and 2 pi included, and only rows
    # deeper than what doubles can hold (about 1e-15 of Z(0)) are not ok
    path = write_log_density(tmp_path / "sk.csv", range(-L, L + 1), skellam_log(lam, L),
                             "# charge: integer\n# volume: 10\n")
    result = analyse(read_density(path), parse_mu_spec(f"0:{TWO_PI}:17") +
                     parse_mu_spec(PI), digits=12)
    info = result.table.info
    assert info["route"] == "direct" and info["lattice"]["step"] == "1"
    for row in result.table.rows:
        exact = skellam_exact(lam, as_mpf(row.mu))
        if row.status == "ok":
            assert abs(row.value - exact) <= row.total_err
        if exact > 1e-12:
            assert row.status == "ok"
        elif exact < 1e-17:
            assert row.status == "unresolved"
    theta = info["theta"]
    for name, exact in (("b2", -1 / 12), ("chi_t", lam / 10)):
        # the cut at |Q| = L is the only error, and the edge error covers it
        assert abs(theta[name] - exact) <= theta[name + "_total_err"] < 1e-6
        assert theta[name + "_status"] == "ok"


def test_skellam_from_samples_direct_and_smoothed():
    # DLMF 10.35.1 on Monte Carlo samples of Q = N1 - N2 (Poisson lam/2 each):
    # every ok row within three standard errors plus its other errors, and
    # theta = pi resolved for small lam; the cumulants give chi_t and b_2
    rng = np.random.default_rng(11)
    lam = 1.5
    q = (rng.poisson(lam / 2, 200000) - rng.poisson(lam / 2, 200000)).astype(float)
    samples = Samples(q=q, volume=5.0)
    density, _ = density_from_samples(samples)
    mus = parse_mu_spec(f"0:{TWO_PI}:9")
    for route in ("direct", "smoothed"):
        result = analyse(density, mus, samples=samples, lattice_route=route)
        assert result.table.info["route"] == route
        for row in result.table.rows:
            exact = skellam_exact(lam, as_mpf(row.mu))
            bound = 3 * (row.stat_err or 0) + row.total_err
            assert row.status == "ok"
            assert abs(row.value - exact) <= bound
        theta = result.table.info["theta"]
        assert abs(theta["b2"] + 1 / 12) <= 3 * theta["b2_total_err"]
        assert abs(theta["chi_t"] - lam / 5) <= 3 * theta["chi_t_total_err"]
    assert "detected" in " ".join(result.table.info["notes"])


def test_wide_skellam_histogram_never_claims_a_wrong_digit():
    # DLMF 10.35.1 with hundreds of sectors (lam = 150): a Monte Carlo
    # histogram cannot know Z(pi) = 1e-130, nor Z(pi/10) = 6e-4 below the
    # 1/sqrt(3e5) noise of its own sum; rows are ok only where they are right
    rng = np.random.default_rng(5)
    lam = 150.0
    q = (rng.poisson(lam / 2, 300000) - rng.poisson(lam / 2, 300000)).astype(float)
    samples = Samples(q=q)
    density, _ = density_from_samples(samples)
    result = analyse(density, parse_mu_spec(f"0:{PI}:11"), samples=samples)
    assert result.table.info["route"] == "mixed"
    statuses = [r.status for r in result.table.rows]
    assert statuses[0] == "ok" and statuses[-1] != "ok"
    for row in result.table.rows:
        if row.status == "ok":
            assert abs(row.value - skellam_exact(lam, as_mpf(row.mu))) <= \
                3 * (row.stat_err or 0) + row.total_err
    theta = result.table.info["theta"]
    # kappa_4 / kappa_2^2 = 1/150 is below what 3e5 samples resolve
    assert theta["b2_status"] != "ok"
    assert abs(theta["b2"] + 1 / 12) <= theta["b2_total_err"] + 3 * theta["b2_err"]


def test_gaussian_on_integers_against_poisson_summation(tmp_path):
    # Poisson summation (DLMF 1.8(iv)) with G&R 3.896.4: the sum over the
    # integers of a Gaussian is a theta function, the integral a Gaussian; the
    # smoothed route at degree 2 holds the exact Gaussian, so the sum must match
    # the theta function and the aliasing report the ratio integral / sum
    s, L = 1.3, 14
    charges = range(-L, L + 1)
    path = write_log_density(tmp_path / "g.csv", charges, [-q * q / (2 * s * s) for q in charges],
                             "# step: 1\n")
    mus = parse_mu_spec(f"0:{PI}:11")
    result = analyse(read_density(path), mus, lattice_route="smoothed", degree=2,
                     errors="none", digits=10)

    def theta_sum(t):
        return sum(mpmath.exp(-s * s * (t + 2 * mpmath.pi * k) ** 2 / 2) for k in range(-6, 7))

    rows = {r[0]: r for r in result.table.info["aliasing"]["rows"]}
    for row in result.table.rows:
        t = as_mpf(row.mu)
        exact = theta_sum(t) / theta_sum(0)
        assert abs(row.value - exact) <= 1e-9 * exact + 1e-13  # the edges at 8 sigma
        ratio = rows[float(row.mu)][2]
        integral = mpmath.exp(-s * s * t * t / 2)
        assert ratio == pytest.approx(float(integral / exact), rel=1e-6, abs=1e-12)
    # at theta = pi the aliased term equals the integral itself: half the sum
    assert rows[float(mus[-1])][2] == pytest.approx(0.5, rel=1e-4)
    assert "off by 50%" in result.table.info["aliasing"]["note"]


def test_stated_errors_propagate_like_perturbed_data(tmp_path):
    # common practice: linear propagation must match the spread of the value
    # over many copies of the data perturbed by their stated errors
    lam, L, sigma = 3.0, 18, 0.02
    logs = [float(v) for v in skellam_log(lam, L)]
    q = np.arange(-L, L + 1, dtype=float)
    density = Density(kind="log_density", q=q, value=np.array(logs),
                      error=np.full(len(q), sigma), error_source="stated",
                      metadata={"charge": "integer"})
    mus = [Fraction(1, 2), Fraction(2), Fraction(314159265358979, 10 ** 14)]
    result = analyse(density, mus, lattice_route="direct")
    assert "stated per-point errors" in result.table.info["statistical_errors"]
    rng = np.random.default_rng(8)
    draws = []
    for _ in range(400):
        w = np.exp(np.array(logs) + rng.normal(0, sigma, len(q)))
        draws.append([np.sum(w * np.exp(1j * float(m) * q)) / np.sum(w) for m in mus])
    spread = np.std(np.array(draws), axis=0)
    for row, s_mc in zip(result.table.rows, spread):
        assert float(row.stat_err) == pytest.approx(float(s_mc), rel=0.12)


def test_slopes_of_unit_width_sum_directly_and_smoothly():
    # DLMF 10.35.1 from finite differences ln P(Q+1) - ln P(Q) with stated
    # errors: the direct sum and the smoothed model agree with the closed form
    lam, L = 4.0, 16
    logs = skellam_log(lam, L)
    slopes = np.array([float(b - a) for a, b in zip(logs, logs[1:])])
    centres = np.arange(-L, L) + 0.5
    rng = np.random.default_rng(2)
    err = 1e-3
    density = Density(kind="slopes", q=centres, value=slopes + rng.normal(0, err, len(slopes)),
                      width=np.ones(len(slopes)), error=np.full(len(slopes), err),
                      error_source="stated", metadata={"step": "1"})
    mus = parse_mu_spec("0:3:7")
    for route in ("direct", "smoothed"):
        result = analyse(density, mus, lattice_route=route)
        for row in result.table.rows:
            exact = skellam_exact(lam, as_mpf(row.mu))
            assert abs(row.value - exact) <= 3 * (row.stat_err or 0) + row.total_err
            assert row.stat_err > 0
    assert result.table.info["lattice"]["first"] == str(-L)


def test_continuous_charge_keeps_the_integral_and_says_what_it_sees():
    # common practice: a density table on an integer grid may be a continuous
    # charge; the integral stays, with a note; '# charge: continuous' silences it
    q = np.arange(-20.0, 21.0)
    value = -q * q / 50
    base = dict(kind="log_density", q=q, value=value, error=np.full(len(q), 1e-3),
                error_source="stated")
    plain = analyse(Density(**base), [Fraction(1, 2)])
    assert plain.table.info["model"].startswith("chebyshev")
    assert any("lattice of step 1" in n for n in plain.table.info["notes"])
    quiet = analyse(Density(**base, metadata={"charge": "continuous"}), [Fraction(1, 2)])
    assert not any("lattice" in n for n in quiet.table.info["notes"])
    lattice = analyse(Density(**base), [Fraction(1, 2)], step="integer")
    assert lattice.table.info["model"].startswith("lattice")
    assert lattice.table.info["lattice"]["source"] == "option"


@pytest.mark.parametrize("meta, step, word", [
    ({"step": "abc"}, None, "metadata 'step'"),
    ({"charge": "integer"}, None, "metadata 'charge'"),
    ({"step": "1"}, None, "coarser lattice of step 2"),
    ({}, "3", "do not lie on a lattice of step 3"),
    ({"range": "everything"}, "2", "metadata 'range'"),
])
def test_bad_lattice_statements_are_input_errors(meta, step, word):
    q = np.array([-4.0, -2.0, 0.0, 2.0, 4.5 if meta.get("charge") else 4.0])
    d = Density(kind="histogram", q=q, value=np.array([3.0, 10, 20, 10, 3]),
                error_source="poisson", metadata=meta, source="h.csv")
    with pytest.raises(InputError, match=word):
        analyse(d, [Fraction(1)], step=step)


def test_option_settles_a_disagreement_and_settings_check_the_step():
    # the metadata say step 1, the data show step 2: --step decides
    q = np.array([-4.0, -2.0, 0.0, 2.0, 4.0])
    d = Density(kind="histogram", q=q, value=np.array([3.0, 10, 20, 10, 3]),
                error_source="poisson", metadata={"step": "1"})
    result = analyse(d, [Fraction(1)], step="2", lattice_route="direct")
    assert result.table.info["lattice"]["step"] == "2"
    with pytest.raises(ValueError, match="--step"):
        Settings(step="-2")
    with pytest.raises(ValueError, match="--lattice-route"):
        Settings(lattice_route="sideways")


def test_charges_in_thirds_from_raw_samples():
    # DLMF 10.35.1 for Q/3 with Q Skellam (a baryon number in quark units):
    # Z(theta) = exp(lam (cos(theta/3) - 1)), periodic in 6 pi; the samples are
    # not integers, so '# step: 1/3' makes the run bin them on the lattice
    rng = np.random.default_rng(3)
    lam = 2.0
    k = rng.poisson(lam / 2, 50000) - rng.poisson(lam / 2, 50000)
    samples = Samples(q=k / 3.0, metadata={"step": "1/3"})
    density, _ = density_from_samples(samples)
    result = analyse(density, parse_mu_spec("0:9.42477796076938:7"), samples=samples)
    lattice = result.table.info["lattice"]
    assert lattice["step"] == "1/3" and lattice["period"] == "2 pi / (1/3)"
    for row in result.table.rows:
        exact = mpmath.exp(lam * (mpmath.cos(as_mpf(row.mu) / 3) - 1))
        assert row.status == "ok"
        assert abs(row.value - exact) <= 3 * row.stat_err + row.total_err


def test_topological_charge_histogram_file_over_minus_pi_to_pi(tmp_path):
    # DLMF 10.35.1 from a histogram file of a dilute-instanton-gas charge
    # (Skellam, lam = 1.5) with '# charge: integer': a scan over [-pi, pi]
    # gives real, even values, right within their errors, theta = -+pi included
    rng = np.random.default_rng(21)
    lam = 1.5
    q = rng.poisson(lam / 2, 100000) - rng.poisson(lam / 2, 100000)
    values, counts = np.unique(q, return_counts=True)
    path = tmp_path / "topo.csv"
    with open(path, "w") as f:
        f.write("# kind: histogram\n# charge: integer\n# volume: 8\nq,count\n")
        f.write("".join(f"{v},{c}\n" for v, c in zip(values, counts)))
    result = analyse(read_density(path), parse_mu_spec(f"-{PI}:{PI}:13"))
    rows = result.table.rows
    assert result.table.info["lattice"]["source"] == "metadata"
    for row in rows:
        exact = skellam_exact(lam, as_mpf(row.mu))
        assert row.status == "ok"
        assert abs(row.value - exact) <= 3 * (row.stat_err or 0) + row.total_err
    for a, b in zip(rows, rows[::-1]):
        # Z(-theta) = conj Z(theta) for a real P, exactly in the sum
        assert abs(a.value - mpmath.conj(b.value)) <= 1e-12
    theta = result.table.info["theta"]
    assert abs(theta["b2"] + 1 / 12) <= 3 * theta["b2_total_err"]
    assert abs(theta["chi_t"] - lam / 8) <= 3 * theta["chi_t_total_err"]
