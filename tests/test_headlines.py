"""The numbers a reader takes in first: the run time, the mu column, the
statistical error and naive cost at mu = 0, the digits of results.csv against
the printed table, the covariance across the scan and the notebook forms of
the table. Checked against closed forms (Gradshteyn & Ryzhik 3.896.4 for a
Gaussian density) and numpy."""
import math
import time
from fractions import Fraction

import mpmath
import numpy as np
import pytest

from signfree.analysis.analyse import analyse
from signfree.analysis.covariance import covariance_records, scan_covariance
from signfree.analysis.results import ResultTable, format_mu
from signfree.analysis.settings import Settings, parse_mu_spec
from signfree.density import Density

SD = 0.02
R = 6


def gaussian_replicas(seed=3, half=10.0, width=0.5):
    """R replicas of the slopes of ln rho = -q^2/2 with noise SD: the
    interval average of the slope is exactly -q_centre (Z(mu)/Z(0) =
    exp(-mu^2/2), Gradshteyn & Ryzhik 3.896.4)."""
    q = np.arange(-half + width / 2, half, width)
    rng = np.random.default_rng(seed)
    reps = -q + SD * rng.standard_normal((R, len(q)))
    err = reps.std(axis=0, ddof=1) / math.sqrt(R)
    return Density(kind="slopes", q=q, value=reps.mean(axis=0), width=np.full_like(q, width),
                   error=err, error_source="replicas", replicas=reps,
                   replica_labels=tuple(range(R)), volume=10.0)


@pytest.fixture(scope="module")
def jack():
    d = gaussian_replicas()
    t0 = time.perf_counter()
    result = analyse(d, parse_mu_spec("0:2:9"), degree=2, parity="even", digits=10,
                     errors="jackknife")
    wall = time.perf_counter() - t0
    return result, wall


def test_run_time_is_the_time_the_analysis_took(jack):
    # the reported seconds lie within the wall-clock time of the call
    # (common practice: a duration is end minus start of the same clock)
    result, wall = jack
    assert 0 < result.seconds <= wall


def test_statistical_error_at_mu_zero_is_exactly_zero(jack):
    # Z(0)/Z(0) = 1 by definition, whatever the data: the error prints 0
    result, _ = jack
    rec = result.table.records()[0]
    assert result.table.rows[0].mu == 0
    assert rec["avg_phase_err"] == "0" and rec["delta_f_err"] == "0"
    assert rec["naive_samples"] == "1"
    assert result.table.records()[1]["avg_phase_err"] not in ("", "0")


def test_results_csv_keeps_two_guard_digits_the_table_does_not(jack):
    result, _ = jack
    table = result.table
    shown, kept = table.records(), table.records(guard=ResultTable.GUARD_DIGITS)
    for r, a, b in zip(table.rows, shown, kept):
        if not a["avg_phase"] or a["avg_phase"] == "0":
            continue
        digits = lambda s: len(s.split("e")[0].replace("-", "").replace(".", "").lstrip("0"))
        assert digits(b["avg_phase"]) == digits(a["avg_phase"]) + 2
        # both are roundings of the same value: they agree within the
        # coarser rounding, and the guard digits are those of the value
        assert abs(mpmath.mpf(b["avg_phase"]) - r.value.real) <= \
            abs(mpmath.mpf(a["avg_phase"]) - r.value.real) + mpmath.mpf(10) ** (r.last_digit - 2)
        # Gradshteyn & Ryzhik 3.896.4: the exact value lies within the total error
        mu = mpmath.mpf(r.mu.numerator) / r.mu.denominator
        assert abs(mpmath.exp(-mu * mu / 2) - mpmath.mpf(b["avg_phase"])) <= \
            r.total_err + mpmath.mpf(10) ** (r.last_digit - 2)
        assert a["mu"] == b["mu"] and a["status"] == b["status"]


def test_covariance_across_the_scan_matches_the_statistical_errors(jack):
    result, _ = jack
    mus, c_re, c_im, c_ri = scan_covariance(result)
    assert mus == [r.mu for r in result.table.rows]
    for k, r in enumerate(result.table.rows):
        # the diagonal is the jackknife variance of the table's stat_err
        assert float(c_re[k][k] + c_im[k][k]) == pytest.approx(float(r.stat_err) ** 2,
                                                               rel=1e-6, abs=1e-300)
        for l in range(len(mus)):
            assert float(c_re[k][l]) == pytest.approx(float(c_re[l][k]), rel=1e-12)
    # numpy's covariance of the jackknife values, scaled by (n-1)^2/n (the
    # jackknife variance is (n-1)/n sum of squares, numpy's 1/(n-1)) and by
    # the square of the Student-t coverage factor of n - 1 degrees of freedom
    # (A&S 26.7.5 at z = 1: 1 + 1/(2 nu) + 1/(4 nu^2) + 1/(16 nu^3))
    method, first, count = result.replica_rows
    assert method == "jackknife" and count == R
    from signfree import engine
    vals = np.array([[float(engine.to_mpf(z.real)) for z in row]
                     for row in result.transform.values[first:first + count]])
    nu = count - 1
    t = 1 + 1 / (2 * nu) + 1 / (4 * nu ** 2) + 1 / (16 * nu ** 3)
    ref = np.cov(vals.T) * (count - 1) ** 2 / count * t * t
    got = np.array([[float(x) for x in row] for row in c_re])
    assert np.allclose(got, ref, rtol=1e-6, atol=1e-30)
    # neighbouring mu share the data: their real parts are correlated
    corr = {(rec["mu_i"], rec["mu_j"]): rec["corr_re"] for rec in covariance_records(result)}
    assert float(corr[("0.25", "0.5")]) > 0.5 and corr[("0.5", "0.5")] == "1.0000"


def test_covariance_needs_replicas():
    d = gaussian_replicas()
    plain = Density(kind="slopes", q=d.q, value=d.value, width=d.width, error=d.error,
                    error_source="stated")
    result = analyse(plain, [Fraction(1)], degree=2, digits=8)
    with pytest.raises(ValueError, match="covariance needs"):
        scan_covariance(result)


@pytest.mark.parametrize("mu, text", [
    (Fraction(1, 10), "0.1"), (Fraction("0.123456789012345678"), "0.123456789012345678"),
    (Fraction(-25, 4), "-6.25"), (Fraction(0), "0"), (Fraction(3), "3"),
    (Fraction(1, 10 ** 7), "0.0000001"), (Fraction(1, 6), "0.16666666666666666667"),
])
def test_mu_column_is_the_exact_decimal(mu, text):
    # a terminating fraction prints exactly; 1/6 to 20 significant digits
    # (decimal expansion by hand; common practice)
    assert format_mu(mu) == text


def test_mu_column_of_a_list_spec_keeps_every_digit_written():
    d = gaussian_replicas()
    result = analyse(d, parse_mu_spec("0.123456789012345678,0.5"), degree=2, digits=8)
    assert [rec["mu"] for rec in result.table.records()] == ["0.123456789012345678", "0.5"]


def test_numpy_and_pandas_forms_of_the_table(jack):
    result, _ = jack
    table = result.table
    arr = table.to_numpy()
    assert arr.dtype.names[:3] == ("mu", "re", "im") and len(arr) == len(table.rows)
    for a, r, rec in zip(arr, table.rows, table.records()):
        mu = float(r.mu)
        assert a["mu"] == mu and a["mu_text"] == rec["mu"] and a["status"] == r.status
        # Gradshteyn & Ryzhik 3.896.4, within the stated total error
        assert abs(a["re"] - math.exp(-mu * mu / 2)) <= a["total_err"] * (1 + 1e-9)
        assert a["avg_phase"] == rec["avg_phase"]
        assert a["delta_f"] == pytest.approx(-math.log(abs(complex(a["re"], a["im"]))) / 10.0,
                                             rel=1e-12, abs=1e-15)
    pandas = pytest.importorskip("pandas", reason="pandas is an optional extra")
    frame = table.to_pandas()
    assert isinstance(frame, pandas.DataFrame)
    assert list(frame["mu"]) == list(arr["mu"]) and list(frame["status"]) == list(arr["status"])


def test_piecewise_model_rejects_a_degree():
    with pytest.raises(ValueError, match="applies only to the Chebyshev model"):
        Settings(model="piecewise", degree=6)
    with pytest.raises(ValueError, match="applies only to the Chebyshev model"):
        Settings(model="cumulant", degree=4)
    assert Settings(model="chebyshev", degree=6).degree == 6


def test_errors_none_says_so_rather_than_no_replicas():
    d = gaussian_replicas()
    result = analyse(d, [Fraction(1)], degree=2, digits=8, errors="none")
    notes = " ".join(result.table.info["notes"])
    assert "--errors none" in notes and "no replicas" not in notes
    assert result.table.records()[0]["avg_phase_err"] == ""
