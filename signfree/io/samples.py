"""Raw samples of the charge q from a phase-quenched run (input kind
``samples``), their histogram, and errors of means that respect
autocorrelation.

Format
------
The same rules and sources as :mod:`signfree.io.reading` (delimited text,
.npy/.npz, HDF5): blank lines skipped, ``#``
lines are comments, ``# key: value`` lines before the header carry metadata
(``kind: samples``, ``volume``, ``symmetry``). The header names the columns:

  ``q``        required: the charge of each configuration, in Monte Carlo
               time order (the order matters for the autocorrelation);
  ``weight``   optional, positive: a reweighting factor per configuration;
  ``replica``  optional integer label: rows sharing a label are one
               independent Markov chain, in file order.

Every problem raises :class:`signfree.errors.InputError` located as
``file:line:column``.

Errors of correlated series: the blocking method of Flyvbjerg & Petersen,
J. Chem. Phys. 91, 461 (1989): pairs of neighbours are averaged repeatedly;
the naive error of the mean of the blocked series rises with the block size
until the blocks are longer than the correlation time, then stays on a
plateau, whose value is the error of the mean. The rule used to pick the
plateau is in :func:`blocking_analysis`.
"""
import math
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from signfree.density import KINDS, SYMMETRIES, Density, check_columns
from signfree.errors import InputError
from signfree.io.reading import (choice, columns_found, density_from_table, read_volume)
from signfree.io.tables import open_table, warn_ignored

SAMPLE_COLUMNS = ("q", "weight", "replica")
MIN_SAMPLES = 4          # k-statistics up to order 4 need four values
MIN_BLOCKS = 16          # blocking levels with fewer blocks are not used
PLATEAU_SIGMAS = 2.0     # tolerance of the plateau rule, in standard errors
MIN_BINS = 3


@dataclass(frozen=True)
class Samples:
    """A time series of the charge q, as read from a ``samples`` file.

    q         the charges in file order (Monte Carlo time within a replica)
    weights   positive reweighting factors per sample, or None
    replicas  integer replica label per sample, or None (one chain)
    """

    q: np.ndarray
    weights: np.ndarray = None
    replicas: np.ndarray = None
    source: str = "<memory>"
    metadata: dict = field(default_factory=dict)
    volume: float = None
    symmetry: str = None

    kind = "samples"

    @property
    def n_samples(self):
        return len(self.q)

    def chains(self):
        """(q, weights or None) per replica, in order of the labels; the
        whole series when there are no labels."""
        if self.replicas is None:
            return [(self.q, self.weights)]
        r = self.replicas
        if np.all(r[1:] >= r[:-1]):
            # chains stored one after another: slices, no copies
            cuts = np.flatnonzero(r[1:] != r[:-1]) + 1
            bounds = zip(np.r_[0, cuts], np.r_[cuts, len(r)])
            return [(self.q[a:b], None if self.weights is None else self.weights[a:b])
                    for a, b in bounds]
        out = []
        for label in np.unique(r):
            keep = r == label
            out.append((self.q[keep], None if self.weights is None else self.weights[keep]))
        return out

    @property
    def replica_labels(self):
        return () if self.replicas is None else tuple(int(v) for v in np.unique(self.replicas))


def read_samples(path, volume=None, symmetry=None):
    """Read a ``samples`` file (any source of :mod:`signfree.io.tables`);
    ``volume`` and ``symmetry`` given here override the metadata. Raises
    :class:`InputError` on bad input."""
    return samples_from_table(open_table(path), volume, symmetry)


def samples_from_table(table, volume=None, symmetry=None):
    """:func:`read_samples` for an opened table: the columns are parsed in C
    and held as float64 arrays (10^7 samples take 80 MB, and no strings)."""
    src = table.source
    kind = choice(table, "kind", None, KINDS + ("samples",))
    if kind is not None and kind != "samples":
        raise InputError(src, f"kind '{kind}' given, but this is read as raw samples "
                         "(kind 'samples')", table.meta_lines.get("kind"))
    symmetry = choice(table, "symmetry", symmetry, SYMMETRIES)
    volume = read_volume(table, volume)
    if "q" not in table.names:
        raise InputError(src, "missing required column 'q' for kind 'samples'; found "
                         + columns_found(table.names), table.header_line)
    wanted = [c for c in SAMPLE_COLUMNS if c in table.names]
    warn_ignored(table, wanted)
    columns = table.load(wanted, integer=("replica",))
    check_columns(src, columns, table.where)
    q = columns["q"]
    if len(q) < MIN_SAMPLES:
        raise InputError(src, f"only {len(q)} sample(s); at least {MIN_SAMPLES} are needed")
    replicas = columns.get("replica")
    return Samples(q=q, weights=columns.get("weight"),
                   replicas=None if replicas is None else np.asarray(replicas, dtype=np.int64),
                   source=src, metadata=dict(table.meta), volume=volume, symmetry=symmetry)


def read_any(path, **kw):
    """Read a file as raw samples (:func:`read_samples`) when its metadata
    says ``kind: samples``, when ``kind='samples'`` is passed, or when no kind
    is stated and every column is one of q, weight, replica; otherwise as a
    density (:func:`signfree.io.reading.read_density`, which gets ``kw``).
    Returns a :class:`Samples` or a :class:`signfree.density.Density`."""
    table = open_table(path)
    kind = kw.get("kind")
    if kind is None:
        stated = str(table.meta.get("kind", "")).strip().lower()
        if stated == "samples":
            kind = "samples"
        elif not stated:
            names = set(table.names)
            if "q" in names and names <= set(SAMPLE_COLUMNS):
                kind = "samples"
    if kind == "samples":
        return samples_from_table(table, volume=kw.get("volume"), symmetry=kw.get("symmetry"))
    return density_from_table(table, **kw)


def load(path, **kw):
    """(density, samples or None, notes) for any input file: a density as
    read, or raw samples together with their histogram density
    (:func:`density_from_samples`)."""
    data = read_any(path, **kw)
    if isinstance(data, Samples):
        density, notes = density_from_samples(data)
        return density, data, notes
    return data, None, []


def _kish(weights, n):
    """Kish's effective sample size (sum w)^2 / sum w^2 (Kish, Survey
    Sampling, 1965); n without weights."""
    if weights is None:
        return float(n)
    return float(weights.sum() ** 2 / (weights ** 2).sum())


QUANTILE_BINS = 4096      # coarse histogram that brackets a weighted quantile


def _weighted_quantiles(x, w, ps):
    """Quantiles of x at the probabilities ``ps``, the k-th smallest of n
    values standing at (k - 1/2)/n of the (weighted) distribution (Hazen's
    plotting position). Without weights by partial sorting (numpy's
    'hazen' method); with weights a coarse weighted histogram brackets each
    quantile and only the values in the bracket are sorted (exact, O(n))."""
    if w is None:
        return [float(v) for v in np.percentile(x, [100 * p for p in ps], method="hazen")]
    lo, hi = float(x.min()), float(x.max())
    if hi <= lo:
        return [lo for _ in ps]
    counts, edges = np.histogram(x, bins=QUANTILE_BINS, range=(lo, hi), weights=w)
    cum = np.concatenate([[0.0], np.cumsum(counts)])
    total = cum[-1]
    out = []
    for p in ps:
        b = int(np.clip(np.searchsorted(cum, p * total) - 1, 0, QUANTILE_BINS - 1))
        pad = 1
        while True:
            a, c = max(0, b - pad), min(QUANTILE_BINS - 1, b + pad)
            left, right = edges[a], edges[c + 1]
            keep = (x >= left) & ((x < right) if c < QUANTILE_BINS - 1 else (x <= right))
            xs, ws = x[keep], w[keep]
            order = np.argsort(xs)
            xs, ws = xs[order], ws[order]
            pos = (cum[a] + np.cumsum(ws) - 0.5 * ws) / total
            if (pos.size and pos[0] <= p <= pos[-1]) or (a == 0 and c == QUANTILE_BINS - 1):
                out.append(float(np.interp(p, pos, xs)))
                break
            pad *= 4
    return out


def _bin_index(x, edges):
    """The bin of each x as numpy.histogram assigns it (bins closed on the
    left, the last also on the right; values outside get an end bin and are
    masked by the caller): arithmetic for even edges, with numpy's own
    correction for rounding at the edges, else a binary search."""
    nb = len(edges) - 1
    step = (edges[-1] - edges[0]) / nb
    if np.allclose(np.diff(edges), step, rtol=1e-12, atol=0):
        idx = ((x - edges[0]) * (nb / (edges[-1] - edges[0]))).astype(np.intp)
        np.clip(idx, 0, nb - 1, out=idx)
        idx[x < edges[idx]] -= 1
        idx[(x >= edges[idx + 1]) & (idx != nb - 1)] += 1
        return np.clip(idx, 0, nb - 1, out=idx)
    return np.clip(np.searchsorted(edges, x, side="right") - 1, 0, nb - 1)


def _label_index(replicas):
    """(sorted labels, index of each sample's label among them)."""
    r = np.asarray(replicas, dtype=np.int64)
    lo, hi = int(r.min()), int(r.max())
    if hi - lo < 1 << 20:
        present = np.flatnonzero(np.bincount(r - lo))
        lookup = np.zeros(hi - lo + 1, dtype=np.int64)
        lookup[present] = np.arange(len(present))
        return tuple(int(v) + lo for v in present), lookup[r - lo]
    labels, index = np.unique(r, return_inverse=True)
    return tuple(int(v) for v in labels), index


def _lattice_step(q):
    """The spacing g of integer-valued charges (gcd of the differences from
    the smallest), or None when q is not integer-valued."""
    if not np.all(q == np.rint(q)) or np.abs(q).max() > 2.0 ** 52:
        return None
    diffs = (q - q.min()).astype(np.int64)
    g = int(np.gcd.reduce(diffs)) if len(diffs) > 1 else 1
    return max(g, 1)


def samples_to_histogram(samples, bins=None, effective_size=None):
    """A kind 'histogram' :class:`Density` from raw samples, so that the
    Chebyshev and piecewise models run on them.

    Binning: integer-valued charges get bins of the lattice spacing g (1 for
    charges on every integer) centred on the lattice points; otherwise
    ``bins`` (a count, or an array of edges) or, by default, the
    Freedman-Diaconis width 2 IQR n^(-1/3) (Freedman & Diaconis, Z.
    Wahrscheinlichkeitstheorie 57, 453 (1981)), with n the effective sample
    size and weighted quantiles, rounded so that whole bins span
    [q_min, q_max].

    Counts are sums of weights, scaled so that their total is
    ``effective_size`` (default: Kish's effective size, which is the plain
    number of samples without weights). The Poisson error 1/sqrt(count) of a
    bin is then right on average; pass ``effective_size`` = N / (2 tau_int)
    from :func:`binned_error` for correlated samples. With replica labels the
    per-replica counts are kept as ``replicas``, as the reader does.
    ``metadata['binning']`` records 'lattice' or 'continuous' (for the
    Sheppard corrections of :func:`signfree.models.cumulant.histogram_cumulants`).
    """
    q = np.asarray(samples.q, dtype=float)
    w = samples.weights
    weights = None if w is None else np.asarray(w, dtype=float)
    n_eff = _kish(w, len(q))
    src = samples.source
    g = _lattice_step(q) if bins is None else None
    lo, hi = float(q.min()), float(q.max())
    if hi <= lo:
        raise InputError(src, f"every sample has q = {lo:g}: no histogram can be made")
    if g is not None:
        nb = int(round((hi - lo) / g)) + 1
        edges = lo - g / 2 + g * np.arange(nb + 1)
        binning = "lattice"
    else:
        if bins is None:
            lower, upper = _weighted_quantiles(q, w, (0.25, 0.75))
            iqr = upper - lower
            h = 2.0 * iqr * n_eff ** (-1.0 / 3.0) if iqr > 0 else (hi - lo) / math.sqrt(n_eff)
            nb = max(MIN_BINS, int(math.ceil((hi - lo) / h)))
            edges = np.linspace(lo, hi, nb + 1)
        elif np.ndim(bins) == 0:
            edges = np.linspace(lo, hi, int(bins) + 1)
        else:
            edges = np.asarray(bins, dtype=float)
            if np.any(np.diff(edges) <= 0):
                raise ValueError("histogram bin edges must increase")
        binning = "continuous"
    if len(edges) - 1 < MIN_BINS:
        raise InputError(src, f"the samples fill only {len(edges) - 1} bin(s); at least "
                         f"{MIN_BINS} are needed for a density")
    total = len(q) if weights is None else float(weights.sum())
    scale = (n_eff if effective_size is None else float(effective_size)) / total
    if samples.replicas is not None:
        labels, index = _label_index(samples.replicas)
        nb = len(edges) - 1
        # one pass for every replica: bin index + nb * replica index
        which = _bin_index(q, edges)
        which += nb * index
        inside = (q >= edges[0]) & (q <= edges[-1])     # as numpy.histogram counts
        if not inside.all():
            weights = np.where(inside, 1.0 if weights is None else weights, 0.0)
        reps = np.bincount(which, weights=weights, minlength=nb * len(labels))
        reps = reps.reshape(len(labels), nb) * scale
        counts = reps.sum(axis=0)
    else:
        labels, reps = (), None
        counts = np.histogram(q, edges, weights=weights)[0] * scale
    meta = dict(samples.metadata)
    meta.update(kind="histogram", binning=binning, samples=str(len(q)))
    return Density(kind="histogram", q=0.5 * (edges[1:] + edges[:-1]), value=counts,
                   width=np.diff(edges), error=None, error_source="poisson",
                   replicas=reps if labels and len(labels) > 1 else None,
                   replica_labels=labels, volume=samples.volume, symmetry=samples.symmetry,
                   source=src, metadata=meta)


CORRELATED_TAU = 0.75      # tau_int above this: counts are scaled to N / (2 tau)


def density_from_samples(samples, bins=None):
    """(histogram Density, notes) for the smoothings: as
    :func:`samples_to_histogram`, with the counts scaled to the effective
    sample size N / (2 tau_int) of q (blocking method, Flyvbjerg & Petersen
    1989; summed over replicas) when the series is correlated
    (tau_int > CORRELATED_TAU), so that the Poisson errors of the bins,
    and hence the fit, are not too small by a factor sqrt(2 tau_int)."""
    n_eff, n_kish, taus = 0.0, 0.0, []
    for q, w in samples.chains():
        if len(q) < 2:
            continue
        b = blocking_analysis(q, w)
        n_eff += b.n_eff
        n_kish += _kish(w, len(q))
        taus.append(b.tau_int)
    notes = []
    if taus and max(taus) > CORRELATED_TAU:
        tau = n_kish / (2 * n_eff)
        notes.append(f"samples are correlated (tau_int = {tau:.3g} by blocking): histogram "
                     f"counts scaled to the effective size {n_eff:.4g}")
        return samples_to_histogram(samples, bins, effective_size=n_eff), notes
    return samples_to_histogram(samples, bins), notes


class BinnedError(NamedTuple):
    """Error of the mean, integrated autocorrelation time and effective
    sample size, as returned by :func:`binned_error`."""

    error: float
    tau_int: float
    n_eff: float


@dataclass(frozen=True)
class Blocking:
    """The levels of a blocking analysis and the chosen plateau.

    levels      (number of blocks, error estimate, its standard error) for
                block sizes 1, 2, 4, ...
    level       index of the chosen level; block_size = 2**level
    plateau     False when the estimate was still rising at the last usable
                level: the series is too short and the error is a lower bound
    """

    error: float
    naive_error: float
    tau_int: float
    n_eff: float
    block_size: int
    level: int
    plateau: bool
    levels: tuple


def blocking_analysis(x, weights=None):
    """Error of the mean of a correlated series by the blocking method of
    Flyvbjerg & Petersen, J. Chem. Phys. 91, 461 (1989).

    Level l holds the means of blocks of 2^l consecutive values (a trailing
    odd value is dropped at each halving). Its error estimate is
    s_l = sqrt(c_l / (n_l - 1)), c_l the variance of the n_l block means,
    with standard error s_l / sqrt(2 (n_l - 1)) (their eq. 28). Levels with
    fewer than MIN_BLOCKS blocks are not used.

    Plateau rule: the chosen level is the first level l such that no later
    level m lies significantly above it, s_m <= s_l + 2 ds_m. The estimate
    rises while the blocks are shorter than the correlation time and then
    stays flat within its errors, so this is the first level whose
    remaining bias is below the statistical error of the later levels. If
    only the last level qualifies, there is no plateau (``plateau`` False).

    With weights, the weighted mean sum w x / sum w is treated by
    linearisation: the series y_t = w_t (x_t - xbar) / mean(w) has the same
    error of its mean, and the effective size is Kish's (sum w)^2 / sum w^2.

    tau_int = (s / s_0)^2 / 2 and n_eff = N / (2 tau_int).
    """
    x = np.asarray(x, dtype=float)
    n = len(x)
    if n < 2:
        raise ValueError("a blocking analysis needs at least two values")
    if weights is None:
        y = x - x.mean()
    else:
        w = np.asarray(weights, dtype=float)
        xbar = float((w * x).sum() / w.sum())
        y = w * (x - xbar) / w.mean()
    size = _kish(None if weights is None else np.asarray(weights, float), n)
    levels = []
    while True:
        m = len(y)
        if m < 2 or (levels and m < MIN_BLOCKS):
            break
        var = float(np.mean((y - y.mean()) ** 2))
        s = math.sqrt(var / (m - 1))
        levels.append((m, s, s / math.sqrt(2.0 * (m - 1))))
        half = m // 2
        y = 0.5 * (y[0:2 * half:2] + y[1:2 * half:2])
    naive = levels[0][1]
    chosen = len(levels) - 1
    for l, (_, s_l, _) in enumerate(levels):
        if all(s_m <= s_l + PLATEAU_SIGMAS * ds_m for _, s_m, ds_m in levels[l + 1:]):
            chosen = l
            break
    plateau = chosen < len(levels) - 1 or len(levels) == 1
    err = levels[chosen][1]
    tau = 0.5 if naive == 0 else 0.5 * (err / naive) ** 2
    return Blocking(error=err, naive_error=naive, tau_int=tau, n_eff=size / (2 * tau),
                    block_size=2 ** chosen, level=chosen, plateau=plateau,
                    levels=tuple(levels))


def binned_error(x, weights=None):
    """(error of the mean, tau_int, effective sample size) of a correlated
    series by the blocking method of Flyvbjerg & Petersen, J. Chem. Phys. 91,
    461 (1989); see :func:`blocking_analysis` for the plateau rule.
    tau_int = 0.5 (err_binned / err_naive)^2, n_eff = N / (2 tau_int)."""
    b = blocking_analysis(x, weights)
    return BinnedError(b.error, b.tau_int, b.n_eff)
