"""Checks of a fitted ln rho against what the data allow between and beyond
their points, and the bin-average correction of histograms.

Spurious weight. A least-squares fit is tied to the data only at the data:
between two anchor points (data points, or interval edges for slopes, whose
interval means are fitted) a polynomial may rise far above anything the
data allow and put weight there that no measurement supports. Between
neighbouring anchors t_i < t_{i+1} a smooth ln rho lies below the chord
through its anchor values plus h^2/8 max(0, -ln rho'') (the error of linear
interpolation, Trefethen ATAP ch. 8 for the interpolation error bound;
common practice), with the curvature taken from the anchors' own second
differences, so that a spike between two points cannot excuse itself.
:func:`spurious_weight` integrates exp(ln rho) above that envelope on every
interval, relative to the model's whole weight: it bounds how much the
model may add to |Z(mu)| at any mu (|exp(i mu q)| = 1).

Bin averages. A histogram count estimates the integral of rho over its bin,
not rho at the bin centre; the Fourier integral of the bin averages differs
from that of rho by Sheppard's factor sin(h mu/2)/(h mu/2) (Sheppard 1898).
:func:`bin_correction` gives, for a model, ln((1/h) Int_bin rho) - ln rho(q_c)
per bin (Gauss-Legendre on each bin), which the fit subtracts from the
measured ln(count/width) so that the model is fitted as bin integrals.
"""
import numpy as np

from signfree.density import slope_knots

ENVELOPE_TOLERANCE = 0.1   # nats above the interpolation envelope that count as spurious
POINTS = 10                # Gauss-Legendre points per interval


def anchors(density):
    """Sorted q positions where the data tie ln rho down: the interval edges
    for slopes, the points for ln rho and histograms, plus the ends of the
    domain."""
    if density.kind == "slopes":
        knots, _, _ = slope_knots(density.q, density.width, density.value)
        return np.asarray(knots, dtype=float)
    q = density.q
    if density.kind == "histogram":
        q = q[density.value > 0]
    a, b = density.domain
    return np.unique(np.concatenate([[a], q, [b]]))


def _second_differences(t, p):
    d2 = np.zeros_like(p)
    h = np.diff(t)
    s = np.diff(p) / h
    d2[1:-1] = 2 * np.diff(s) / (h[1:] + h[:-1])
    if len(p) > 2:
        d2[0], d2[-1] = d2[1], d2[-2]
    return d2


def spurious_weight(density, model, tolerance=ENVELOPE_TOLERANCE):
    """Fraction of the model's weight exp(ln rho) that lies above the
    interpolation envelope of its values at the anchors (module docstring),
    and the largest excess of ln rho over that envelope in nats. Where the
    domain reaches beyond the outermost data point (half a bin of a
    histogram), the envelope there continues the line through the two
    outermost points instead of the model's own value."""
    t = anchors(density)
    p_t = np.asarray(model.log_density(t), dtype=float)
    if density.kind == "histogram" and len(t) >= 4:
        for end, a, b in ((0, 1, 2), (-1, -2, -3)):
            slope = (p_t[a] - p_t[b]) / (t[a] - t[b])
            p_t[end] = min(p_t[end], p_t[a] + slope * (t[end] - t[a]))
    d2 = _second_differences(t, p_t)
    curv = np.minimum(d2[:-1], d2[1:])
    h = np.diff(t)
    x, w = np.polynomial.legendre.leggauss(POINTS)
    u = 0.5 * (t[:-1, None] + t[1:, None]) + 0.5 * h[:, None] * x[None, :]
    p_u = model.log_density(u)
    frac = (u - t[:-1, None]) / h[:, None]
    chord = p_t[:-1, None] * (1 - frac) + p_t[1:, None] * frac
    allowed = chord + (h * h / 8 * np.maximum(0.0, -curv))[:, None] + tolerance
    top = max(float(p_u.max()), float(p_t.max()))
    weight = np.exp(p_u - top) * w[None, :] * (0.5 * h)[:, None]
    excess = np.clip(1 - np.exp(np.minimum(allowed - p_u, 50.0)), 0, None) * weight
    total = float(weight.sum())
    return (float(excess.sum()) / total if total > 0 else 0.0,
            float(max(0.0, (p_u - allowed + tolerance).max())))


def bin_correction(density, model):
    """ln((1/h) Int_bin exp(ln rho) dq) - ln rho(q_c) for every bin of a
    histogram density (zero for empty bins), by Gauss-Legendre on each bin."""
    q, h = density.q, density.width if density.width is not None else np.ones_like(density.q)
    x, w = np.polynomial.legendre.leggauss(POINTS)
    u = q[:, None] + 0.5 * h[:, None] * x[None, :]
    lr = model.log_density(u) - model.log_density(q)[:, None]
    top = lr.max(axis=1, keepdims=True)
    return top[:, 0] + np.log((np.exp(lr - top) * w[None, :]).sum(axis=1) / 2)
