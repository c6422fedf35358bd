"""The machinery that lets 10^7 samples and 10^5 density points through:
numpy.loadtxt's parse equals the exact line-by-line one, the weighted
quartiles of the bin-width rule equal the sort-based definition, and the
one-pass histogram of every replica equals numpy.histogram per replica.
(Speed and memory are measured by scripts/bench_samples.py, not here.)"""
import numpy as np
import pytest

from signfree.io.samples import (Samples, _bin_index, _weighted_quantiles, read_any,
                                 samples_to_histogram)
from signfree.io.tables import open_table

RNG = np.random.default_rng(5)


def test_fast_parse_equals_the_exact_scan(tmp_path):
    path = tmp_path / "s.txt"
    q = RNG.normal(0, 3, 20000)
    w = RNG.uniform(0.5, 2, 20000)
    r = np.repeat([3, 1, 2, 7], 5000)
    with open(path, "w") as f:
        f.write("# kind: samples\n\n  Replica   Q   Weight\n")
        for k, (a, b, c) in enumerate(zip(r, q, w)):
            f.write(f"{a} {float(b)!r} {float(c)!r}\n")
            if k % 997 == 0:
                f.write("# checkpoint\n\n")
    table = open_table(path)
    fast = table.load(["q", "weight", "replica"], integer=("replica",))
    exact = table._scan(["q", "weight", "replica"], integer=("replica",))
    for name in fast:
        np.testing.assert_array_equal(fast[name], exact[name])
    np.testing.assert_array_equal(fast["q"], q)       # Python's repr round-trips a double
    np.testing.assert_array_equal(fast["replica"], r)
    assert fast["replica"].dtype == np.int64
    s = read_any(path)
    assert isinstance(s, Samples) and s.replica_labels == (1, 2, 3, 7)
    # one chain per label, in the order of the labels, each in file order
    chains = s.chains()
    assert [len(c[0]) for c in chains] == [5000] * 4
    np.testing.assert_array_equal(chains[0][0], q[r == 1])
    np.testing.assert_array_equal(chains[2][1], w[r == 3])
    grouped = Samples(q=q, weights=w, replicas=np.sort(r))      # stored chain after chain
    np.testing.assert_array_equal(grouped.chains()[1][0], q[5000:10000])


def test_a_bad_field_deep_in_a_long_file_is_located(tmp_path):
    path = tmp_path / "s.csv"
    lines = ["q,weight"] + [f"{k % 17},1" for k in range(30000)]
    lines[25001] = "3,x1"
    path.write_text("\n".join(lines) + "\n")
    from signfree.errors import InputError
    with pytest.raises(InputError, match=r"s.csv:25002:2: column 'weight': 'x1' is not a "
                                         r"number"):
        read_any(path)


def hazen(x, w, p):
    """The definition, by a full sort: the k-th smallest value stands at
    (W_<k + w_k / 2) / W (Hazen's plotting position; common practice)."""
    order = np.argsort(x, kind="stable")
    xs, ws = x[order], w[order]
    pos = (np.cumsum(ws) - 0.5 * ws) / ws.sum()
    return float(np.interp(p, pos, xs))


@pytest.mark.parametrize("n", [7, 1000, 200001])
def test_weighted_quartiles_equal_the_sort_definition(n):
    x = RNG.standard_t(3, n)
    w = RNG.exponential(1.0, n)
    got = _weighted_quantiles(x, w, (0.25, 0.75))
    assert got == pytest.approx([hazen(x, w, 0.25), hazen(x, w, 0.75)], rel=1e-12, abs=1e-15)
    # without weights numpy's 'hazen' method is the same definition
    flat = _weighted_quantiles(x, None, (0.25, 0.75))
    ones = np.ones(n)
    assert flat == pytest.approx([hazen(x, ones, 0.25), hazen(x, ones, 0.75)],
                                 rel=1e-12, abs=1e-12)
    # a heavy weight on one value: the bracket must widen to find it
    w2 = w.copy()
    w2[np.argmax(x)] = 1e6 * w.sum()
    assert _weighted_quantiles(x, w2, (0.25,)) == pytest.approx([hazen(x, w2, 0.25)], rel=1e-12)


def test_one_pass_replica_histograms_equal_numpy_histogram():
    q = RNG.normal(0, 2, 50000)
    w = RNG.uniform(0.5, 1.5, 50000)
    r = RNG.integers(0, 5, 50000) * 10 - 20          # labels -20, -10, ..., 20, shuffled
    s = Samples(q=q, weights=w, replicas=r)
    d = samples_to_histogram(s, bins=37)
    edges = np.linspace(q.min(), q.max(), 38)
    assert d.replica_labels == (-20, -10, 0, 10, 20)
    scale = len(q) / w.sum() * (w.sum() ** 2 / (w ** 2).sum()) / len(q)   # Kish size / sum w
    for k, lab in enumerate(d.replica_labels):
        want = np.histogram(q[r == lab], edges, weights=w[r == lab])[0] * scale
        np.testing.assert_allclose(d.replicas[k], want, rtol=1e-10)
    explicit = np.array([-3.0, -1.0, 0.0, 0.5, 2.0])  # uneven edges, values outside dropped
    d2 = samples_to_histogram(s, bins=explicit)
    want = [np.histogram(q[r == lab], explicit, weights=w[r == lab])[0] for lab in
            d2.replica_labels]
    got = d2.replicas / (d2.value.sum() / np.sum(want))
    np.testing.assert_allclose(got, want, rtol=1e-10)


def test_bin_index_is_numpy_histograms_rule():
    for edges in (np.linspace(-3.3, 2.7, 101), -10.5 + np.arange(22.0)):
        x = np.r_[RNG.normal(0, 1, 100000), edges]
        x = x[(x >= edges[0]) & (x <= edges[-1])]
        np.testing.assert_array_equal(np.bincount(_bin_index(x, edges), minlength=len(edges) - 1),
                                      np.histogram(x, edges)[0])
