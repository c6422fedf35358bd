"""The covariance of Z(mu_i)/Z(0) across a mu scan, from the resampled fits
(jackknife or bootstrap over the replicas), for anyone who fits the scan
further: the values at neighbouring mu come from the same data and are
strongly correlated.

For the delete-one jackknife, C_kl = (n - 1)/n sum_i (z_ik - zbar_k)(z_il -
zbar_l); for the bootstrap, C_kl = 1/(B - 1) sum_i (...)(...) (Efron &
Tibshirani, An Introduction to the Bootstrap, 1993, ch. 11 and 6). Real and
imaginary parts are kept apart. Like the statistical errors of the table,
the matrix is scaled by the square of their coverage factor (the Student-t
factor of the replicas' degrees of freedom;
:func:`signfree.analysis.uncertainty.coverage_factor`), so that its
diagonal reproduces the table: stat_err^2 = C^re_kk + C^im_kk.
"""
import mpmath
import numpy as np

from signfree import engine
from signfree.analysis.results import format_mu
from signfree.analysis.uncertainty import coverage_factor

COLUMNS = ("mu_i", "mu_j", "cov_re", "cov_im", "cov_re_im", "corr_re")


def scan_covariance(analysis):
    """(mus, C_re, C_im, C_re_im): lists of lists of mpmath numbers, with
    C_re[k][l] = Cov(Re Z_k, Re Z_l), C_im the same for the imaginary
    parts, C_re_im[k][l] = Cov(Re Z_k, Im Z_l). Raises ValueError when the
    analysis has no resampled fits (no replicas, or a route that keeps
    none: --degree per-mu, the cumulant model)."""
    if getattr(analysis, "replica_rows", None) is None:
        raise ValueError("--covariance needs the resampled fits of replicas (jackknife or "
                         "bootstrap errors with the Chebyshev or piecewise model at one "
                         f"degree); {analysis.density.source} gives none")
    method, first, count = analysis.replica_rows
    tr = analysis.transform
    rows = tr.values[first:first + count]
    mus = [r.mu for r in analysis.table.rows]
    # each column is scaled by its central magnitude so that values far
    # below 1e-308 keep their relative precision in double arithmetic
    scale = []
    for k in range(len(mus)):
        z0 = tr.values[0][k]
        mag = mpmath.hypot(engine.to_mpf(z0.real), engine.to_mpf(z0.imag))
        scale.append(mag if mag > 0 else mpmath.mpf(1))
    z = np.array([[complex(float(engine.to_mpf(row[k].real) / scale[k]),
                           float(engine.to_mpf(row[k].imag) / scale[k]))
                   for k in range(len(mus))] for row in rows])
    dev = z - z.mean(axis=0)
    factor = (count - 1) / count if method == "jackknife" else 1.0 / (count - 1)
    factor *= coverage_factor(method, len(analysis.density.replica_labels)) ** 2
    re, im = dev.real, dev.imag
    blocks = [factor * re.T @ re, factor * im.T @ im, factor * re.T @ im]
    out = [[[mpmath.mpf(float(b[k, l])) * scale[k] * scale[l] for l in range(len(mus))]
            for k in range(len(mus))] for b in blocks]
    return (mus, *out)


def covariance_records(analysis):
    """covariance.csv as records: one row per pair (mu_i, mu_j), the three
    covariances to three significant digits and the correlation of the real
    parts."""
    mus, c_re, c_im, c_ri = scan_covariance(analysis)
    out = []
    for k, a in enumerate(mus):
        for l, b in enumerate(mus):
            den = mpmath.sqrt(c_re[k][k] * c_re[l][l])
            corr = "" if den == 0 else f"{float(c_re[k][l] / den):.4f}"
            out.append({"mu_i": format_mu(a), "mu_j": format_mu(b),
                        "cov_re": _num(c_re[k][l]), "cov_im": _num(c_im[k][l]),
                        "cov_re_im": _num(c_ri[k][l]), "corr_re": corr})
    return out


def _num(x):
    """A covariance to three significant digits, any exponent."""
    if x == 0:
        return "0"
    with mpmath.workdps(15):
        return mpmath.nstr(x, 3, min_fixed=-4, max_fixed=6).replace("e+", "e")
