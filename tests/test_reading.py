"""Tests for signfree.reading: good files of every kind, and one failing file
for every class of bad input with its exact file:line:column location."""
import numpy as np
import pytest

from signfree.errors import InputError
from signfree.io.reading import read_density


def write(tmp_path, lines, name="data.csv"):
    """A file whose physical line n is lines[n - 1]."""
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n")
    return path


def fails(path, where, *words, **kwargs):
    """read_density(path) raises InputError starting '<path><where>: ' and
    mentioning every word."""
    with pytest.raises(InputError) as info:
        read_density(path, **kwargs)
    text = str(info.value)
    assert text.startswith(f"{path}{where}: "), text
    for word in words:
        assert word in text, text
    return info.value


SLOPES = [
    "# kind: slopes",            # 1
    "# Volume : 16.5",           # 2
    "# symmetry: even",          # 3
    "# sampler: flat-histogram v2",  # 4
    "# plain comment without a key",  # 5
    "",                          # 6
    "slope_err, slope, q, width",  # 7
    "0.2, 3.0, 2.0, 1.0",        # 8
    "0.1, 1.0, 0.0, 1.0",        # 9
    "# a comment: after the header",  # 10
    "",                          # 11
    "0.3, 2.0, 1.0, 0.5",        # 12
]


# ----------------------------------------------------------------- good files

def test_slopes_single_replica_sorted_permuted_with_metadata(tmp_path):
    path = write(tmp_path, SLOPES)
    d = read_density(path)
    assert d.kind == "slopes"
    np.testing.assert_array_equal(d.q, [0.0, 1.0, 2.0])
    np.testing.assert_array_equal(d.value, [1.0, 2.0, 3.0])
    np.testing.assert_array_equal(d.width, [1.0, 0.5, 1.0])
    np.testing.assert_array_equal(d.error, [0.1, 0.3, 0.2])
    assert d.error_source == "stated"
    assert d.replicas is None and d.replica_labels == ()
    assert d.volume == 16.5 and d.symmetry == "even"
    assert d.source == str(path)
    assert d.metadata == {"kind": "slopes", "volume": "16.5",
                          "symmetry": "even", "sampler": "flat-histogram v2"}
    assert d.q.dtype == np.float64 and d.value.dtype == np.float64


def test_arguments_override_metadata(tmp_path):
    path = write(tmp_path, SLOPES)
    d = read_density(path, volume=2, symmetry="odd")
    assert d.volume == 2.0 and d.symmetry == "odd"
    assert d.metadata["volume"] == "16.5"


def test_argument_kind_overrides_metadata(tmp_path):
    path = write(tmp_path, ["# kind: histogram", "q,count,log_density",
                            "0,1,5", "1,2,6", "2,3,7"])
    d = read_density(path, kind="log_density")
    assert d.kind == "log_density"
    np.testing.assert_array_equal(d.value, [5.0, 6.0, 7.0])


@pytest.mark.parametrize("column, kind", [
    ("slope", "slopes"), ("log_density", "log_density"),
    ("count", "histogram")])
def test_kind_inferred_from_header(tmp_path, column, kind):
    path = write(tmp_path, [f"q,width,{column}", "0,1,4", "1,1,5", "2,1,6"])
    d = read_density(path)
    assert d.kind == kind
    np.testing.assert_array_equal(d.value, [4.0, 5.0, 6.0])


def test_inference_prefers_slope_over_count(tmp_path):
    path = write(tmp_path, ["q,count,width,slope", "0,1,1,4", "1,1,1,5",
                            "2,1,1,6"])
    assert read_density(path).kind == "slopes"


# standard error of the mean: common practice
def test_slopes_replica_mean_and_standard_error(tmp_path):
    path = write(tmp_path, [
        "replica,q,width,slope",
        "3,1.0,0.5,2.6", "1,0.0,0.5,1.0", "2,1.0,0.5,2.2",
        "1,1.0,0.5,2.0", "3,0.0,0.5,1.3", "2,0.0,0.5,0.8",
        "2,2.0,0.5,3.1", "1,2.0,0.5,3.0", "3,2.0,0.5,2.75"])
    d = read_density(path)
    table = np.array([[1.0, 2.0, 3.0], [0.8, 2.2, 3.1], [1.3, 2.6, 2.75]])
    assert d.replica_labels == (1, 2, 3)
    np.testing.assert_array_equal(d.replicas, table)
    np.testing.assert_array_equal(d.q, [0.0, 1.0, 2.0])
    np.testing.assert_array_equal(d.width, [0.5, 0.5, 0.5])
    np.testing.assert_allclose(d.value, [31 / 30, 6.8 / 3, 8.85 / 3],
                               rtol=1e-14)
    expected = np.std(table, axis=0, ddof=1) / np.sqrt(3)
    np.testing.assert_allclose(d.error, expected, rtol=1e-14)
    assert d.error_source == "replicas"


# standard error of the mean: common practice
def test_slopes_replicas_with_stated_errors(tmp_path):
    path = write(tmp_path, [
        "q,width,slope,slope_err,replica",
        "0,1,1.0,0.3,1", "1,1,2.0,0.3,1", "2,1,3.0,0.6,1",
        "0,1,2.0,0.4,2", "1,1,4.0,0.4,2", "2,1,5.0,0.8,2"])
    d = read_density(path)
    np.testing.assert_allclose(d.value, [1.5, 3.0, 4.0], rtol=1e-15)
    # sqrt(mean(err^2) / R): sqrt((0.09 + 0.16) / 2 / 2) = 0.25
    np.testing.assert_allclose(d.error, [0.25, 0.25, 0.5], rtol=1e-14)
    assert d.error_source == "stated"


# standard error of the mean: common practice
def test_log_density_replicas_shifted_then_averaged(tmp_path):
    path = write(tmp_path, [
        "log_density,q,replica",
        "10,0,1", "12,1,1", "17,2,1",
        "-8,2,2", "-14,0,2", "-8,1,2"])
    d = read_density(path)
    assert d.kind == "log_density" and d.width is None
    shifted = np.array([[-3.0, -1.0, 4.0], [-4.0, 2.0, 2.0]])
    np.testing.assert_allclose(d.replicas, shifted, rtol=1e-14)
    np.testing.assert_allclose(d.value, [-3.5, 0.5, 3.0], rtol=1e-14)
    np.testing.assert_allclose(d.error, [0.5, 1.5, 1.0], rtol=1e-14)
    np.testing.assert_allclose(
        d.error, np.std(shifted, axis=0, ddof=1) / np.sqrt(2), rtol=1e-14)
    assert d.error_source == "replicas"


def test_log_density_single_replica_kept_as_given(tmp_path):
    path = write(tmp_path, ["q,log_density,log_density_err",
                            "-1,5,0.5", "1,7,0.25", "0,6,0.125"])
    d = read_density(path)
    np.testing.assert_array_equal(d.q, [-1.0, 0.0, 1.0])
    np.testing.assert_array_equal(d.value, [5.0, 6.0, 7.0])
    np.testing.assert_array_equal(d.error, [0.5, 0.125, 0.25])
    assert d.error_source == "stated"


def test_single_replica_without_errors_has_none(tmp_path):
    path = write(tmp_path, ["q,log_density,replica",
                            "0,5,4", "1,7,4", "2,6,4"])
    d = read_density(path)
    assert d.error is None and d.error_source == "none"
    assert d.replicas is None and d.replica_labels == (4,)


def test_identical_replicas_give_no_error(tmp_path):
    # differ by a constant only: identical once shifted to zero mean
    path = write(tmp_path, ["q,log_density,replica",
                            "0,0.1,1", "1,0.2,1", "2,0.7,1",
                            "0,1.1,2", "1,1.2,2", "2,1.7,2"])
    d = read_density(path)
    assert d.error is None and d.error_source == "none"
    np.testing.assert_allclose(d.value, [-7 / 30, -4 / 30, 11 / 30],
                               atol=1e-14)


def test_histogram_pooled_over_replicas(tmp_path):
    path = write(tmp_path, [
        "# kind: histogram",
        "q,count,width,replica",
        "0.5,12.0,1,2", "-0.5,3,1,2", "1.5,0,1,2",
        "1.5,4,1,1", "0.5,10,1,1", "-0.5,7,1,1"])
    d = read_density(path)
    np.testing.assert_array_equal(d.q, [-0.5, 0.5, 1.5])
    np.testing.assert_array_equal(d.value, [10.0, 22.0, 4.0])
    np.testing.assert_array_equal(d.replicas, [[7, 10, 4], [3, 12, 0]])
    np.testing.assert_array_equal(d.width, [1.0, 1.0, 1.0])
    assert d.error is None and d.error_source == "poisson"
    assert d.replica_labels == (1, 2)


def test_histogram_without_width_and_ignored_columns(tmp_path, capsys):
    path = write(tmp_path, ["q,note,count,slope_err",
                            "2,a,5,x", "0,b,1,y", "1,c,3,z"])
    d = read_density(path)
    np.testing.assert_array_equal(d.value, [1.0, 3.0, 5.0])
    assert d.width is None
    err = capsys.readouterr().err.splitlines()
    assert err == [f"{path}: ignoring column 'note'",
                   f"{path}: ignoring column 'slope_err'"]


# ------------------------------------------------------------------ bad files

def test_file_not_found(tmp_path):
    path = tmp_path / "missing.csv"
    err = fails(path, "", "not found")
    assert err.line is None


def test_unreadable_file(tmp_path):
    fails(tmp_path, "", "cannot read")


def test_not_utf8(tmp_path):
    path = tmp_path / "data.csv"
    path.write_bytes(b"q,width,slope\n\xff\xfe,1,2\n")
    fails(path, "", "cannot read", "UTF-8")


@pytest.mark.parametrize("lines", [[], ["# only: metadata", "", "# note"]])
def test_empty_file(tmp_path, lines):
    path = tmp_path / "data.csv"
    path.write_text("\n".join(lines))
    fails(path, "", "empty")


def test_no_data_rows(tmp_path):
    path = write(tmp_path, ["# kind: slopes", "q,width,slope", "# nothing"])
    fails(path, "", "no data rows")


def test_wrong_number_of_fields(tmp_path):
    path = write(tmp_path, ["q,width,slope", "0,1,2", "", "1,1", "2,1,3"])
    err = fails(path, ":4", "expected 3 fields", "found 2")
    assert err.column is None


def test_text_where_number_belongs(tmp_path):
    path = write(tmp_path, ["q,width,slope", "0,1,2", "1,1,abc", "2,1,3"])
    err = str(fails(path, ":3:3"))
    assert err == f"{path}:3:3: column 'slope': 'abc' is not a number"


def test_empty_field_is_not_a_number(tmp_path):
    path = write(tmp_path, ["q,width,slope", "0,1,2", ",1,2", "2,1,3"])
    fails(path, ":3:1", "column 'q'", "not a number")


@pytest.mark.parametrize("text", ["nan", "NaN", "inf", "-Infinity", "+INF",
                                  "1e999"])
def test_non_finite_number(tmp_path, text):
    path = write(tmp_path, ["q,slope,width", "0,1,1", f"1,1,{text}", "2,1,1"])
    fails(path, ":3:3", "column 'width'", "is not a finite number")


def test_missing_required_column(tmp_path):
    path = write(tmp_path, ["# kind: slopes", "# x: y", "q,slope",
                            "0,1", "1,2", "2,3"])
    err = fails(path, ":3", "missing", "'width'", "slopes")
    assert err.column is None


def test_kind_cannot_be_inferred(tmp_path):
    path = write(tmp_path, ["", "q,value", "0,1", "1,2", "2,3"])
    fails(path, ":2", "cannot infer the kind")


def test_unknown_kind_in_metadata(tmp_path):
    path = write(tmp_path, ["# volume: 4", "# kind: spectrum",
                            "q,count", "0,1", "1,2", "2,3"])
    err = fails(path, ":2", "unknown kind", "'spectrum'")
    assert err.column is None


def test_unknown_kind_argument(tmp_path):
    path = write(tmp_path, ["q,count", "0,1", "1,2", "2,3"])
    err = fails(path, "", "unknown kind", "'counts'", kind="counts")
    assert err.line is None


@pytest.mark.parametrize("text", ["big", "0", "-3", "nan", "inf"])
def test_bad_volume_in_metadata(tmp_path, text):
    path = write(tmp_path, ["# kind: histogram", "#", f"# volume: {text}",
                            "q,count", "0,1", "1,2", "2,3"])
    fails(path, ":3", "volume", "positive")


def test_bad_volume_argument(tmp_path):
    path = write(tmp_path, ["q,count", "0,1", "1,2", "2,3"])
    fails(path, "", "volume", "positive", volume=-1.0)


def test_bad_symmetry_in_metadata(tmp_path):
    path = write(tmp_path, ["# symmetry: sideways", "q,count",
                            "0,1", "1,2", "2,3"])
    fails(path, ":1", "unknown symmetry", "'sideways'")


@pytest.mark.parametrize("text", ["0", "-0.5"])
def test_width_not_positive(tmp_path, text):
    path = write(tmp_path, ["slope,width,q", "1,1,0", "1,1,1",
                            f"1,{text},2"])
    fails(path, ":4:2", "column 'width'", "must be > 0")


def test_negative_count(tmp_path):
    path = write(tmp_path, ["q,count", "0,1", "1,-2", "2,3"])
    fails(path, ":3:2", "column 'count'", "must be >= 0")


def test_count_not_whole(tmp_path):
    path = write(tmp_path, ["count,q", "12.0,0", "12,1", "12.5,2"])
    fails(path, ":4:1", "column 'count'", "'12.5' is not a whole number")


def test_replica_label_must_be_integer(tmp_path):
    path = write(tmp_path, ["q,count,replica", "0,1,1", "1,2,3.0", "2,3,1"])
    fails(path, ":3:3", "column 'replica'", "'3.0' is not an integer")


def test_repeated_q_within_replica(tmp_path):
    path = write(tmp_path, ["q,slope,width,replica",
                            "0,1,1,1", "1.5,1,1,1", "2,1,1,1",
                            "0,1,1,2", "1.5,1,1,2", "1.5,2,1,2", "2,1,1,2"])
    err = str(fails(path, ":7:1"))
    assert err.endswith("column 'q': q = 1.5 repeated in replica 2 "
                        "(first at line 6)")


def test_repeated_q_within_tolerance_single_replica(tmp_path):
    path = write(tmp_path, ["q,log_density", "1.0000000000001,1", "0,2",
                            "1,3", "2,4"])
    fails(path, ":4:1", "repeated", "first at line 2")


def test_replicas_with_different_q_grids(tmp_path):
    path = write(tmp_path, ["replica,q,log_density",
                            "1,0,1", "2,0,1", "1,1,1", "2,1.1,1",
                            "1,2,1", "2,2,1", "3,1,1", "3,0,1", "3,2,1"])
    err = str(fails(path, ":3:2"))
    assert err.endswith("column 'q': replica 2 has a different q grid from "
                        "replica 1 (q = 1.1 vs 1.0 at point 2)")


def test_replicas_with_different_point_counts(tmp_path):
    path = write(tmp_path, ["replica,q,log_density",
                            "1,0,1", "1,1,1", "1,2,1",
                            "2,0,1", "2,1,1", "2,2,1", "2,3,1"])
    fails(path, ":5:2", "different q grid", "4 points vs 3")


def test_grid_tolerance_accepts_rounding(tmp_path):
    path = write(tmp_path, ["replica,q,log_density",
                            "1,0,1", "1,0.1,2", "1,0.2,3",
                            "2,0,1", "2,0.1000000000001,2", "2,0.2,4"])
    np.testing.assert_array_equal(read_density(path).q, [0.0, 0.1, 0.2])


def test_replicas_with_different_widths(tmp_path):
    path = write(tmp_path, ["q,width,slope,replica",
                            "0,1,1,7", "1,1,1,7", "2,1,1,7",
                            "# second replica",
                            "0,1,1,9", "1,1,1,9", "2,0.9,1,9"])
    fails(path, ":6:2", "column 'width'", "replica 9", "different widths")


def test_histogram_replicas_with_different_widths(tmp_path):
    path = write(tmp_path, ["q,count,width,replica",
                            "0,1,1,1", "1,1,1,1", "2,1,1,1",
                            "0,1,1,2", "1,1,2,2", "2,1,1,2"])
    fails(path, ":5:3", "different widths")


@pytest.mark.parametrize("column, text", [("slope_err", "-0.1"),
                                          ("slope_err", "0")])
def test_slope_error_not_positive(tmp_path, column, text):
    path = write(tmp_path, [f"q,width,slope,{column}", "0,1,1,0.1",
                            f"1,1,1,{text}", "2,1,1,0.1"])
    fails(path, ":3:4", f"column '{column}'", "must be > 0")


@pytest.mark.parametrize("text", ["-2", "0.0"])
def test_log_density_error_not_positive(tmp_path, text):
    path = write(tmp_path, ["log_density_err,q,log_density", f"{text},0,1",
                            "1,1,1", "1,2,1"])
    fails(path, ":2:1", "column 'log_density_err'", "must be > 0")


def test_fewer_than_three_points(tmp_path):
    path = write(tmp_path, ["q,count,replica", "0,1,1", "1,1,1",
                            "0,2,2", "1,2,2"])
    err = fails(path, "", "only 2 distinct q", "at least 3")
    assert err.line is None


def test_duplicate_header_column(tmp_path):
    path = write(tmp_path, ["# kind: slopes", "q,width,q,slope", "0,1,0,1"])
    fails(path, ":2:3", "column 'q' appears twice")


def test_repeated_metadata_key(tmp_path):
    path = write(tmp_path, ["# kind: slopes", "# Kind: histogram",
                            "q,width,slope", "0,1,1", "1,1,1", "2,1,1"])
    fails(path, ":2", "metadata key 'kind' repeated", "first at line 1")

