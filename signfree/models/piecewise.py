"""The raw piecewise-linear reconstruction of ln rho, kept as a model beside
the smoothed ones so a user can see what the cusps at interval edges do to
the Fourier integral (the transform of a cusp decays only like 1/mu^2).

From slopes: ln rho linear with the measured slope on each interval and
continuous at the interval edges (the usual density-of-states
reconstruction, see :func:`signfree.density.slope_knots`). From ln rho on a
grid (log densities, histograms): linear interpolation between the points.
The Fourier integral of this model is done exactly, segment by segment.
"""
from dataclasses import dataclass

import numpy as np

from signfree.density import slope_knots


@dataclass(frozen=True)
class PiecewiseModel:
    """ln rho continuous and linear between ``knots``; an immutable value."""

    knots: np.ndarray
    values: np.ndarray
    parity: str = "none"

    integrand = "piecewise-linear"
    label = "piecewise"
    degree = None
    chi2 = float("nan")
    dof = 0

    @classmethod
    def from_density(cls, density, values=None):
        """Reconstruct from a density (``values`` overrides its central
        values, for replicas)."""
        value = density.value if values is None else values
        if density.kind == "slopes":
            knots, lnrho, _ = slope_knots(density.q, density.width, value)
        else:
            if values is None:
                knots, lnrho, _ = density.log_density_points()
            elif density.kind == "histogram":
                keep = value > 0
                width = density.width[keep] if density.width is not None else 1.0
                knots, lnrho = density.q[keep], np.log((value[keep] + 0.5) / width)
            else:
                knots, lnrho = density.q, value
        lnrho = np.asarray(lnrho, dtype=float)
        return cls(knots=np.asarray(knots, dtype=float), values=lnrho - lnrho.max(),
                   parity=density.symmetry or "none")

    def coarsened(self):
        """The same reconstruction at half the resolution (every other knot,
        the last one kept). Its difference from this model is the model
        error of the piecewise model: the cusp artefact grows like the
        square of the knot spacing, so the change when the resolution halves
        is about three times the artefact itself (a conservative estimate)."""
        keep = list(range(0, len(self.knots), 2))
        if keep[-1] != len(self.knots) - 1:
            keep.append(len(self.knots) - 1)
        knots, lnrho = self.knots[keep], self.values[keep]
        return PiecewiseModel(knots=knots, values=lnrho - lnrho.max(), parity=self.parity)

    @property
    def domain(self):
        return float(self.knots[0]), float(self.knots[-1])

    def log_density(self, q):
        return np.interp(q, self.knots, self.values)

    def derivative(self, q):
        slopes = np.diff(self.values) / np.diff(self.knots)
        i = np.clip(np.searchsorted(self.knots, q, side="right") - 1, 0, len(slopes) - 1)
        return slopes[i]
