"""The validated density object every later stage works from, and the
piecewise-linear reconstruction of ln rho from it.

A ``Density`` is made only by :mod:`signfree.io.reading` (or directly by a
notebook user); nothing after reading re-checks it.
"""
from dataclasses import dataclass, field

import numpy as np

KINDS = ("slopes", "log_density", "histogram")


@dataclass(frozen=True)
class Density:
    """A measured generalised density rho(q) over the charge q.

    kind      'slopes' (d ln rho/dq per interval), 'log_density' (ln rho up to a
              constant on a grid) or 'histogram' (counts per bin).
    q         sorted grid: interval centres, grid points or bin centres.
    width     interval or bin widths (slopes always; histogram if given).
    value     central value per point: the replica mean of the slope or of
              ln rho (each replica shifted to zero mean first, since ln rho is
              known only up to a constant), or the counts pooled over replicas.
    error     standard error of ``value`` per point, or None.
    error_source  'stated', 'replicas', 'poisson' or 'none'.
    replicas  R x N array of the per-replica values on the same grid, or None.
    """

    kind: str
    q: np.ndarray
    value: np.ndarray
    width: np.ndarray = None
    error: np.ndarray = None
    error_source: str = "none"
    replicas: np.ndarray = None
    replica_labels: tuple = ()
    volume: float = None
    symmetry: str = None
    source: str = "<memory>"
    metadata: dict = field(default_factory=dict)

    @property
    def n_points(self):
        return len(self.q)

    @property
    def domain(self):
        """[q_min, q_max] covered by the data: interval edges for slopes and
        for histograms with widths, otherwise the outermost grid points."""
        if self.width is not None:
            return (float(self.q[0] - self.width[0] / 2),
                    float(self.q[-1] + self.width[-1] / 2))
        return float(self.q[0]), float(self.q[-1])

    def log_density_points(self):
        """(q, ln rho, error) for the kinds measured as ln rho: log_density as
        given; histogram as ln((count + 1/2) / width) with the Poisson error
        1/sqrt(count), empty bins left out (ln 0 has no finite value). The
        half count removes the 1/(2 count) bias of the logarithm of a Poisson
        count (E ln(n + 1/2) = ln lambda + O(lambda^-2); common practice)."""
        if self.kind == "log_density":
            return self.q, self.value, self.error
        if self.kind == "histogram":
            keep = self.value > 0
            width = self.width[keep] if self.width is not None else 1.0
            counts = self.value[keep]
            return self.q[keep], np.log((counts + 0.5) / width), 1.0 / np.sqrt(counts)
        raise ValueError(f"kind {self.kind!r} is not measured as ln rho")


def slope_knots(q, width, slope):
    """Continuous piecewise-linear ln rho from per-interval slopes: the usual
    density-of-states reconstruction (ln rho linear with the measured slope on
    each interval, continuous at the edges).

    Returns (knots, ln_rho_at_knots, segment_slopes) with ln rho = 0 at the
    first knot. Where consecutive intervals leave a gap it is bridged with
    the mean of the two neighbouring slopes; where they overlap the shared
    edge is put at the middle of the overlap.
    """
    lo = q - width / 2
    hi = q + width / 2
    knots = [lo[0]]
    slopes = []
    for i in range(len(q)):
        if i + 1 < len(q) and hi[i] > lo[i + 1]:
            end = 0.5 * (hi[i] + lo[i + 1])
        else:
            end = hi[i]
        slopes.append(slope[i])
        knots.append(end)
        if i + 1 < len(q) and lo[i + 1] > end:
            slopes.append(0.5 * (slope[i] + slope[i + 1]))
            knots.append(lo[i + 1])
    knots = np.asarray(knots, dtype=float)
    slopes = np.asarray(slopes, dtype=float)
    values = np.concatenate([[0.0], np.cumsum(slopes * np.diff(knots))])
    return knots, values, slopes


POOL_DOF = 40      # degrees of freedom a pooled replica variance aims for


def pooled_errors(error, n_replicas):
    """(errors, degrees of freedom): the standard errors of replica means
    with each point's variance pooled over a window of neighbouring points.

    A variance from the scatter of R replicas has only R - 1 degrees of
    freedom; used as fit weights, such noisy variances make the weighted
    fit noisier than its nominal covariance says and correlate the weights
    with the data. Where the noise varies smoothly along q, the mean of the
    variances over a window of 2 w + 1 neighbours (w chosen so that the
    window holds about POOL_DOF degrees of freedom; shrunk at the ends) is
    an estimate with (2 w + 1)(R - 1) degrees of freedom (pooled variance;
    common practice)."""
    var = np.asarray(error, dtype=float) ** 2
    n = len(var)
    dof_each = max(n_replicas - 1, 1)
    w = min(max(0, int(np.ceil((POOL_DOF / dof_each - 1) / 2))), (n - 1) // 2)
    if w == 0:
        return np.sqrt(var), dof_each
    csum = np.concatenate([[0.0], np.cumsum(var)])
    lo = np.clip(np.arange(n) - w, 0, n)
    hi = np.clip(np.arange(n) + w + 1, 0, n)
    pooled = (csum[hi] - csum[lo]) / (hi - lo)
    return np.sqrt(pooled), int(dof_each * (2 * w + 1))
