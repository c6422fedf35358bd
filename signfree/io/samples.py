"""Raw samples of the charge q from a phase-quenched run (input kind
``samples``), their histogram, and errors of means that respect
autocorrelation.

Format
------
The same CSV rules as :mod:`signfree.io.reading`: blank lines skipped, ``#``
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
import sys
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from signfree.density import KINDS, Density
from signfree.errors import InputError
from signfree.io.reading import (SYMMETRIES, _choice, _field, _header, _read_lines, _split,
                               _volume)

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
        out = []
        for label in np.unique(self.replicas):
            keep = self.replicas == label
            out.append((self.q[keep], None if self.weights is None else self.weights[keep]))
        return out

    @property
    def replica_labels(self):
        return () if self.replicas is None else tuple(int(v) for v in np.unique(self.replicas))


def read_samples(path, volume=None, symmetry=None):
    """Read a ``samples`` file; ``volume`` and ``symmetry`` given here override
    the metadata. Raises :class:`InputError` on bad input."""
    src = str(path)
    meta, meta_lines, header, rows = _split(_read_lines(path, src), src)
    kind = _choice(src, "kind", None, meta, meta_lines, KINDS + ("samples",))
    if kind is not None and kind != "samples":
        raise InputError(src, f"kind '{kind}' given, but this is read as raw samples "
                         "(kind 'samples')", meta_lines["kind"])
    symmetry = _choice(src, "symmetry", symmetry, meta, meta_lines, SYMMETRIES)
    volume = _volume(src, volume, meta, meta_lines)
    hno, names = _header(src, header)
    if "q" not in names:
        raise InputError(src, "missing required column 'q' for kind 'samples'", hno)
    for name in names:
        if name not in SAMPLE_COLUMNS:
            print(f"{src}: ignoring column '{name}'", file=sys.stderr)
    if not rows:
        raise InputError(src, "no data rows")
    cols = {c: names.index(c) for c in SAMPLE_COLUMNS if c in names}
    q, weights, labels = [], [], []
    for no, fields in rows:
        if len(fields) != len(names):
            raise InputError(src, f"expected {len(names)} fields as in the "
                             f"header, found {len(fields)}", no)
        q.append(_field(src, no, cols["q"] + 1, "q", fields[cols["q"]]))
        if "weight" in cols:
            j = cols["weight"]
            w = _field(src, no, j + 1, "weight", fields[j])
            if w <= 0:
                raise InputError(src, f"column 'weight': must be > 0, got {fields[j]}",
                                 no, j + 1)
            weights.append(w)
        if "replica" in cols:
            j = cols["replica"]
            labels.append(_field(src, no, j + 1, "replica", fields[j]))
    if len(q) < MIN_SAMPLES:
        raise InputError(src, f"only {len(q)} sample(s); at least {MIN_SAMPLES} are needed")
    return Samples(q=np.array(q, dtype=np.float64),
                   weights=np.array(weights, dtype=np.float64) if weights else None,
                   replicas=np.array(labels, dtype=np.int64) if labels else None,
                   source=src, metadata=dict(meta), volume=volume, symmetry=symmetry)


def read_any(path, **kw):
    """Read a file as raw samples (:func:`read_samples`) when its metadata
    says ``kind: samples``, when ``kind='samples'`` is passed, or when no kind
    is stated and every header column is one of q, weight, replica; otherwise
    as a density (:func:`signfree.io.reading.read_density`, which gets ``kw``).
    Returns a :class:`Samples` or a :class:`signfree.density.Density`."""
    from signfree.io.reading import read_density
    src = str(path)
    kind = kw.get("kind")
    if kind is None:
        meta, _, header, _ = _split(_read_lines(path, src), src)
        stated = meta.get("kind", "").strip().lower()
        if stated == "samples":
            kind = "samples"
        elif not stated and header is not None:
            names = set(header[1])
            if "q" in names and names <= set(SAMPLE_COLUMNS):
                kind = "samples"
    if kind == "samples":
        return read_samples(path, volume=kw.get("volume"), symmetry=kw.get("symmetry"))
    return read_density(path, **kw)


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


def _weighted_quantile(x, w, p):
    order = np.argsort(x, kind="stable")
    xs, ws = x[order], w[order]
    cum = (np.cumsum(ws) - 0.5 * ws) / ws.sum()
    return float(np.interp(p, cum, xs))


def _lattice_step(q):
    """The spacing g of integer-valued charges (gcd of the differences from
    the smallest), or None when q is not integer-valued."""
    if not np.all(q == np.rint(q)) or np.abs(q).max() > 2.0 ** 52:
        return None
    diffs = np.unique((q - q.min()).astype(np.int64))
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
    weights = np.ones_like(q) if w is None else np.asarray(w, dtype=float)
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
            iqr = (_weighted_quantile(q, weights, 0.75)
                   - _weighted_quantile(q, weights, 0.25))
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
    scale = (n_eff if effective_size is None else float(effective_size)) / weights.sum()
    labels = () if samples.replicas is None else tuple(int(v) for v in np.unique(samples.replicas))
    if labels:
        reps = np.array([np.histogram(q[samples.replicas == lab], edges,
                                      weights=weights[samples.replicas == lab])[0]
                         for lab in labels]) * scale
        counts = reps.sum(axis=0)
    else:
        reps = None
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
