"""The files pipelines write: whitespace- and semicolon-separated text,
headers in any case, NumPy .npy/.npz, HDF5 (optional h5py), pandas and R
CSV writers, histogram replicas on different ranges, and Density.from_arrays
checking exactly as a file is checked. The reference is the arrays the
files were written from (numpy, pandas and h5py write them)."""
import numpy as np
import pytest

from signfree.density import Density
from signfree.errors import InputError
from signfree.io.reading import read_density
from signfree.io.samples import Samples, read_any

RNG = np.random.default_rng(11)
Q = np.arange(-5.0, 5.5, 1.0)
SLOPE = -Q + 0.01 * RNG.standard_normal(len(Q))
ERR = np.full(len(Q), 0.01)


def check_slopes(d):
    assert d.kind == "slopes"
    np.testing.assert_array_equal(d.q, Q)
    np.testing.assert_allclose(d.value, SLOPE, rtol=0, atol=1e-12)
    np.testing.assert_allclose(d.error, ERR)
    np.testing.assert_array_equal(d.width, np.ones(len(Q)))


@pytest.mark.parametrize("sep, header", [
    (" ", "Q   Width  SLOPE  slope_Err"),
    ("\t", "q\twidth\tslope\tslope_err"),
    (";", "q;width;slope;slope_err"),
    (", ", '"Q", "WIDTH", "Slope", "Slope_err"'),
])
def test_separators_and_header_case(tmp_path, sep, header):
    path = tmp_path / "d.txt"
    lines = ["# kind: slopes", header]
    lines += [sep.join(repr(float(v)) for v in row) for row in zip(Q, np.ones(len(Q)), SLOPE, ERR)]
    path.write_text("\n".join(lines) + "\n")
    check_slopes(read_density(path))


def test_whitespace_file_with_aligned_columns_and_comments(tmp_path):
    path = tmp_path / "d.dat"
    text = "#   q        count\n" if False else ""
    text += "# kind: histogram\n    q     count\n"
    for q, c in zip(Q, [1, 3, 7, 12, 20, 25, 20, 12, 7, 3, 1]):
        text += f"  {q:6.1f}  {c:6d}   \n"
        if q == 0:
            text += "# a comment in the middle\n\n"
    path.write_text(text)
    d = read_density(path)
    np.testing.assert_array_equal(d.value, [1, 3, 7, 12, 20, 25, 20, 12, 7, 3, 1])


def test_error_lists_the_columns_found(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("# kind: slopes\nQ,Slope,Error\n0,1,1\n1,2,1\n2,3,1\n")
    with pytest.raises(InputError) as info:
        read_density(path)
    text = str(info.value)
    assert text.startswith(f"{path}:2: ") and "'width'" in text
    assert "found columns 'q', 'slope', 'error'" in text


def test_decimal_comma_gets_a_hint(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("q;count\n0;1\n1;2,5\n2;3\n")
    with pytest.raises(InputError, match=r":3:2: column 'count': '2,5' is not a number "
                                         r"\(a decimal comma"):
        read_density(path)


def test_pandas_and_r_style_csv(tmp_path):
    pandas = pytest.importorskip("pandas", reason="pandas is an optional extra")
    frame = pandas.DataFrame({"q": Q, "width": 1.0, "slope": SLOPE, "slope_err": ERR})
    path = tmp_path / "pandas.csv"
    frame.to_csv(path)                      # with the unnamed index column
    check_slopes(read_density(path))
    r_style = tmp_path / "r.csv"            # R's write.csv: quoted names and row names
    lines = ['"","q","width","slope","slope_err"']
    lines += [f'"{i + 1}",{float(q)!r},1,{float(s)!r},{float(e)!r}' for i, (q, s, e) in enumerate(zip(Q, SLOPE, ERR))]
    r_style.write_text("\n".join(lines) + "\n")
    check_slopes(read_density(r_style))


def test_npz_and_structured_npy(tmp_path):
    npz = tmp_path / "d.npz"
    np.savez(npz, Q=Q, width=np.ones(len(Q)), slope=SLOPE, slope_err=ERR, kind="slopes",
             volume=16.0)
    d = read_density(npz)
    check_slopes(d)
    assert d.volume == 16.0
    npy = tmp_path / "d.npy"
    rec = np.zeros(len(Q), dtype=[("q", "f8"), ("width", "f8"), ("slope", "f8"),
                                  ("slope_err", "f8")])
    rec["q"], rec["width"], rec["slope"], rec["slope_err"] = Q, 1.0, SLOPE, ERR
    np.save(npy, rec)
    check_slopes(read_density(npy))
    plain = tmp_path / "q.npy"                # one plain column: samples of q
    np.save(plain, RNG.integers(-4, 5, 500).astype(float))
    s = read_any(plain)
    assert isinstance(s, Samples) and s.n_samples == 500


def test_npz_bad_value_names_the_row(tmp_path):
    npz = tmp_path / "d.npz"
    width = np.ones(len(Q))
    width[3] = -1
    np.savez(npz, q=Q, width=width, slope=SLOPE)
    with pytest.raises(InputError, match=r"column 'width': must be > 0, got -1.0 \(row 4\)"):
        read_density(npz)


def test_hdf5_group_and_compound_dataset(tmp_path):
    h5py = pytest.importorskip("h5py", reason="h5py is an optional extra (signfree[hdf5])")
    path = tmp_path / "run.h5"
    with h5py.File(path, "w") as f:
        g = f.create_group("llr/slopes")
        g.attrs["kind"] = "slopes"
        g.attrs["volume"] = 8.0
        for name, values in (("q", Q), ("width", np.ones(len(Q))), ("slope", SLOPE),
                             ("slope_err", ERR)):
            g.create_dataset(name, data=values)
        rec = np.zeros(len(Q), dtype=[("q", "f8"), ("count", "i8")])
        rec["q"], rec["count"] = Q, [1, 3, 7, 12, 20, 25, 20, 12, 7, 3, 1]
        f.create_dataset("mc/histogram", data=rec)
        f.create_dataset("mc/samples", data=RNG.standard_normal(200))
    d = read_density(f"{path}:/llr/slopes")
    check_slopes(d)
    assert d.volume == 8.0
    h = read_density(f"{path}:/mc/histogram")
    assert h.kind == "histogram" and h.value.sum() == 111
    assert isinstance(read_any(f"{path}:/mc/samples"), Samples)
    with pytest.raises(InputError, match="no group or dataset '/nope'"):
        read_density(f"{path}:/nope")


def test_histogram_replicas_on_different_ranges_get_zero_counts(tmp_path):
    path = tmp_path / "h.csv"
    path.write_text("q,count,replica\n" + "".join(f"{q},{c},1\n" for q, c in
                                                  [(-1, 4), (0, 9), (1, 5)])
                    + "".join(f"{q},{c},2\n" for q, c in [(-2, 1), (-1, 3), (0, 8), (1, 4),
                                                          (2, 2)]))
    d = read_density(path)
    np.testing.assert_array_equal(d.q, [-2, -1, 0, 1, 2])
    np.testing.assert_array_equal(d.value, [1, 7, 17, 9, 2])
    np.testing.assert_array_equal(d.replicas, [[0, 4, 9, 5, 0], [1, 3, 8, 4, 2]])


def test_histogram_replicas_with_another_binning_are_refused(tmp_path):
    path = tmp_path / "h.csv"
    path.write_text("q,count,replica\n0,1,1\n1,2,1\n2,3,1\n0.5,1,2\n1.5,2,2\n2.5,1,2\n")
    with pytest.raises(InputError, match=r":5:1: column 'q': replica 2 has a different q grid"):
        read_density(path)


def test_from_arrays_checks_as_reading_does(tmp_path):
    d = Density.from_arrays(q=Q, width=np.ones(len(Q)), slope=SLOPE, slope_err=ERR)
    check_slopes(d)
    path = tmp_path / "d.csv"
    path.write_text("q,width,slope\n" + "".join(f"{float(q)!r},1,{float(s)!r}\n" for q, s in zip(Q, SLOPE)))
    np.testing.assert_array_equal(read_density(path).value, Density.from_arrays(
        q=Q, width=np.ones(len(Q)), slope=SLOPE).value)
    bad = SLOPE.copy()
    bad[2] = np.nan
    with pytest.raises(InputError, match=r"column 'slope': 'nan' is not a finite number "
                                         r"\(row 3\)"):
        Density.from_arrays(q=Q, width=np.ones(len(Q)), slope=bad)
    with pytest.raises(InputError, match="q = 1.0 repeated"):
        Density.from_arrays(q=np.r_[Q, 1.0], width=np.ones(len(Q) + 1), slope=np.r_[SLOPE, 0])
    with pytest.raises(InputError, match="missing required array"):
        Density.from_arrays(q=Q, slope=SLOPE)
    with pytest.raises(InputError, match="'12.5' is not a whole number"):
        Density.from_arrays(q=[0.0, 1, 2], count=[1, 12.5, 3])
    with pytest.raises(InputError, match="only 2 distinct q"):
        Density.from_arrays(q=[0.0, 1], count=[1, 2])
    two = Density.from_arrays(q=np.r_[Q, Q], width=np.ones(2 * len(Q)),
                              slope=np.r_[SLOPE, SLOPE + 0.02],
                              replica=np.repeat([1, 2], len(Q)))
    assert two.replica_labels == (1, 2) and two.error_source == "replicas"
    np.testing.assert_allclose(two.value, SLOPE + 0.01)
