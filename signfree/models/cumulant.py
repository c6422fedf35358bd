"""Cumulants of the charge and the truncated cumulant expansion of the phase
factor,

    ln(Z(mu)/Z(0)) = sum_n kappa_n (i mu)^n / n!,

which converges only for |mu| below the nearest complex zero of Z(mu) (the
Lee-Yang zeros; see :mod:`signfree.analysis.zeros`). Three sources of cumulants:

* raw samples (:func:`sample_cumulants`): Fisher's k-statistics k_1..k_4
  (Fisher, Proc. London Math. Soc. 30, 199 (1930); the unbiased estimators of
  scipy.stats.kstat) and, above order 4, the cumulants of the empirical
  distribution, with errors by the jackknife over blocks (Quenouille 1956,
  Tukey 1958; blocks chosen by the blocking method of Flyvbjerg & Petersen,
  J. Chem. Phys. 91, 461 (1989));
* a histogram (:func:`histogram_cumulants`), with Sheppard's corrections for
  continuous binning (Sheppard, Proc. London Math. Soc. 29, 353 (1898));
* a smoothed model of ln rho (:func:`signfree.engine.moments.model_cumulants`):
  raw moments by Gauss-Legendre quadrature in Arb ball arithmetic.

Moments become cumulants by the recursion
kappa_n = m_n - sum_{k=1}^{n-1} C(n-1, k-1) kappa_k m_{n-k}
(Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, 3.14), which
cancels heavily for n > 2 and is therefore done at high precision: mpmath
and gmpy2 here, Arb balls (whose radii show the cancellation) for models.

The :class:`CumulantModel` is the truncated series as a model value; the
engine sums it in closed form (:mod:`signfree.engine.closed_forms`).
"""
import dataclasses
import math
from dataclasses import dataclass

import gmpy2
import mpmath
import numpy as np
from gmpy2 import mpfr

SAMPLE_DPS = 50            # mpmath digits for histogram cumulants
SAMPLE_BITS = 170          # gmpy2 bits (about 50 digits) for sample cumulants
MIN_JACKKNIFE_BLOCKS = 20
MAX_JACKKNIFE_BLOCKS = 500
ZERO_SIGMAS = 2.0          # a cumulant within this many errors of 0 vanishes


# ----------------------------------------------------------------- algebra

def moments_to_cumulants(m):
    """Cumulants kappa_1..kappa_N from raw moments m_0 = 1, m_1..m_N by the
    recursion kappa_n = m_n - sum_{k=1}^{n-1} C(n-1, k-1) kappa_k m_{n-k}
    (Kendall & Stuart, vol. 1, 3.14). Works on anything with + and * (mpf,
    arb); the caller supplies the precision. Returns [kappa_1, ..., kappa_N]."""
    kappa = [None]
    for n in range(1, len(m)):
        total = m[n]
        for k in range(1, n):
            total = total - math.comb(n - 1, k - 1) * kappa[k] * m[n - k]
        kappa.append(total)
    return kappa[1:]


def _central(raw):
    """Central moments from raw moments about some point (raw[0] = 1)."""
    mean = raw[1]
    out = [raw[0] * 0 + 1, raw[0] * 0]
    for r in range(2, len(raw)):
        out.append(sum(math.comb(r, k) * raw[k] * (-mean) ** (r - k) for k in range(r + 1)))
    return out


def _k_statistics(m, n):
    """Fisher's k-statistics k_2, k_3, k_4 from the central sample moments
    m_r = (1/n) sum (x - xbar)^r (Kendall & Stuart, vol. 1, 12.10; the
    estimators of scipy.stats.kstat)."""
    n = m[0] * 0 + n
    out = {}
    if len(m) > 2 and n > 1:
        out[2] = n / (n - 1) * m[2]
    if len(m) > 3 and n > 2:
        out[3] = n ** 2 / ((n - 1) * (n - 2)) * m[3]
    if len(m) > 4 and n > 3:
        out[4] = n ** 2 * ((n + 1) * m[4] - 3 * (n - 1) * m[2] ** 2) / (
            (n - 1) * (n - 2) * (n - 3))
    return out


def _cumulants_from_sums(sums, centre, count, unbiased):
    """Cumulants from power sums S_r = sum w (x - centre)^r (mpf), the
    k-statistics replacing orders 2..4 when ``unbiased``."""
    raw = [s / sums[0] for s in sums]
    central = _central(raw)
    kappa = moments_to_cumulants(central)
    kappa[0] = centre + raw[1]
    if unbiased:
        for r, k in _k_statistics(central, count).items():
            if r <= len(kappa):
                kappa[r - 1] = k
    return kappa


# ----------------------------------------------------------------- samples

@dataclass(frozen=True)
class SampleCumulants:
    """Cumulants of a series with jackknife errors.

    kappa       [kappa_1, ..., kappa_N] as mpf (k-statistics up to order 4
                without weights)
    kappa_err   jackknife standard errors (floats)
    block_size  samples per jackknife block; n_blocks the number of blocks
    n_eff       effective sample size N / (2 tau_int) of q
    """

    kappa: list
    kappa_err: list
    block_size: int
    n_blocks: int
    n_eff: float
    n: int
    notes: tuple = ()


def sample_cumulants(q, order, weights=None, replicas=None, block_size=None):
    """Cumulants kappa_1..kappa_order of a (correlated) series of charges.

    Orders 1..4 without weights are Fisher's k-statistics (unbiased; Fisher
    1930, as scipy.stats.kstat); higher orders, and every order with weights,
    are the cumulants of the (weighted) empirical distribution, from its
    central moments by the moment-cumulant recursion at SAMPLE_BITS bits
    (gmpy2; the results are returned as mpmath mpf). Power sums about the
    float mean are accumulated with exactly rounded summation (math.fsum of
    float products).

    Errors: delete-one-block jackknife (Quenouille 1956; Tukey 1958). The
    block size is the largest plateau block size of the blocking method
    (Flyvbjerg & Petersen 1989) over the series (q - qbar)^r, r = 1..min(order,
    4), so that autocorrelated series get correspondingly larger errors; it
    is raised if that leaves more than MAX_JACKKNIFE_BLOCKS blocks and
    lowered to keep at least MIN_JACKKNIFE_BLOCKS. Blocks never span two
    replicas. ``q`` may also be a :class:`signfree.io.samples.Samples`.
    """
    from signfree.io.samples import Samples, blocking_analysis
    if isinstance(q, Samples):
        weights = q.weights if weights is None else weights
        replicas = q.replicas if replicas is None else replicas
        q = q.q
    q = np.asarray(q, dtype=float)
    order = int(order)
    if order < 1:
        raise ValueError("cumulant order must be at least 1")
    n = len(q)
    if n < max(4, order):
        raise ValueError(f"{n} samples are too few for cumulants up to order {order}")
    w = None if weights is None else np.asarray(weights, dtype=float)
    labels = np.zeros(n, dtype=np.int64) if replicas is None else np.asarray(replicas)
    chains = [np.flatnonzero(labels == lab) for lab in np.unique(labels)]
    centre = float(np.average(q, weights=w))
    d = q - centre
    notes = []

    # block size from the blocking method, per chain and per power
    n_eff = 0.0
    chosen = 1
    for idx in chains:
        if len(idx) < 2:
            continue
        wc = None if w is None else w[idx]
        for r in range(1, min(order, 4) + 1):
            b = blocking_analysis(d[idx] ** r, wc)
            chosen = max(chosen, b.block_size)
            if r == 1:
                n_eff += b.n_eff
                if not b.plateau:
                    notes.append("the blocking estimate of q has no plateau: the series is "
                                 "short against its autocorrelation; errors are lower bounds")
    B = int(block_size) if block_size is not None else chosen
    total_blocks = lambda size: sum(len(idx) // size for idx in chains)
    while total_blocks(B) > MAX_JACKKNIFE_BLOCKS:
        B *= 2
    while B > 1 and total_blocks(B) < MIN_JACKKNIFE_BLOCKS:
        B //= 2
        notes.append("blocks shortened to keep enough jackknife blocks")
    notes = tuple(dict.fromkeys(notes))

    powers = [np.ones_like(d) if w is None else w.copy()]
    for _ in range(order):
        powers.append(powers[-1] * d)
    with gmpy2.context(gmpy2.get_context(), precision=SAMPLE_BITS):
        mc = mpfr(centre)
        kappa = _cumulants_from_sums([mpfr(math.fsum(p)) for p in powers], mc, n, w is None)
        # per-block power sums of the kept samples (each chain's tail that
        # does not fill a block is left out of the jackknife)
        blocks = []
        for idx in chains:
            nb = len(idx) // B
            if nb:
                keep = idx[: nb * B]
                blocks.append(np.stack([p[keep].reshape(nb, B).sum(axis=1) for p in powers],
                                       axis=1))
        blocks = np.concatenate(blocks, axis=0)
        nb = len(blocks)
        kept = [mpfr(math.fsum(blocks[:, r])) for r in range(order + 1)]
        jack = [_cumulants_from_sums([kept[r] - mpfr(float(blocks[b, r]))
                                      for r in range(order + 1)], mc, (nb - 1) * B, w is None)
                for b in range(nb)]
        errs = []
        for r in range(order):
            vals = [j[r] for j in jack]
            mean = sum(vals) / nb
            errs.append(float(gmpy2.sqrt((nb - 1) * sum((v - mean) ** 2 for v in vals) / nb)))
        kappa = [_mpfr_to_mpf(k) for k in kappa]
    return SampleCumulants(kappa=kappa, kappa_err=errs, block_size=B, n_blocks=nb,
                           n_eff=n_eff, n=n, notes=notes)


def _mpfr_to_mpf(x):
    """A gmpy2 mpfr as an mpmath mpf, exactly."""
    if x == 0:
        return mpmath.mpf(0)
    man, exp = x.as_mantissa_exp()
    with mpmath.workprec(max(53, int(man).bit_length())):
        return mpmath.mpf((int(man), int(exp)))


# --------------------------------------------------------------- histogram

def _histogram_sums(q, counts, centre, order):
    d = [mpmath.mpf(float(x)) - centre for x in q]
    c = [mpmath.mpf(float(v)) for v in counts]
    return [mpmath.fsum(ci * di ** r for ci, di in zip(c, d)) for r in range(order + 1)]


def _sheppard(kappa, width):
    """Sheppard's corrections for cumulants of data grouped in bins of equal
    width h: kappa_n -= B_n h^n / n for even n >= 2 (Sheppard 1898; Kendall
    & Stuart vol. 1, 3.18), B_n the Bernoulli numbers; odd orders unchanged."""
    h = mpmath.mpf(float(width))
    return [k - (mpmath.bernoulli(n) * h ** n / n if n % 2 == 0 else 0)
            for n, k in enumerate(kappa, 1)]


def histogram_cumulants(density, order, sheppard=None):
    """Cumulants kappa_1..kappa_order (mpf, SAMPLE_DPS digits) of a kind
    'histogram' density, treating each count as sitting at its bin centre.

    ``sheppard``: apply Sheppard's corrections (equal bin widths only);
    None means: when ``density.metadata['binning']`` is 'continuous' (set by
    :func:`signfree.io.samples.samples_to_histogram`); charges on a lattice
    need none."""
    if density.kind != "histogram":
        raise ValueError(f"histogram_cumulants needs a histogram, not kind {density.kind!r}")
    if sheppard is None:
        sheppard = density.metadata.get("binning") == "continuous"
    with mpmath.workdps(SAMPLE_DPS):
        kappa = _histogram_kappa(density.q, density.value, order)
        if sheppard:
            kappa = _sheppard(kappa, _equal_width(density))
    return kappa


def _equal_width(density):
    w = density.width
    if w is None or np.ptp(w) > 1e-9 * w.max():
        raise ValueError("Sheppard's corrections need bins of equal width")
    return float(w.mean())


def _histogram_kappa(q, counts, order):
    counts = np.asarray(counts, dtype=float)
    total = counts.sum()
    centre = mpmath.mpf(float((counts * q).sum() / total))
    return _cumulants_from_sums(_histogram_sums(q, counts, centre, order), centre, None, False)


def histogram_cumulant_errors(density, order):
    """Standard errors of :func:`histogram_cumulants`: the jackknife over
    replicas (Quenouille 1956; Tukey 1958) when the density has at least
    two, otherwise linear propagation for independent Poisson counts
    (common practice): var kappa_n = sum_i c_i (d kappa_n / d c_i)^2, with
    d m_r / d c_i = (d_i^r - m_r) / S_0 for the moments m_r about a fixed
    centre (cumulants above the first do not depend on it) and the
    derivatives of the moment-cumulant recursion carried along with it."""
    q, counts = density.q, np.asarray(density.value, dtype=float)
    with mpmath.workdps(SAMPLE_DPS):
        if density.replicas is not None and len(density.replicas) >= 2:
            reps = np.asarray(density.replicas, dtype=float)
            R = len(reps)
            jack = [_histogram_kappa(q, counts - reps[r], order) for r in range(R)]
            out = []
            for n in range(order):
                vals = [j[n] for j in jack]
                mean = mpmath.fsum(vals) / R
                out.append(float(mpmath.sqrt((R - 1) * mpmath.fsum((v - mean) ** 2
                                                                   for v in vals) / R)))
            return out
        keep = counts > 0
        c = [mpmath.mpf(float(v)) for v in counts[keep]]
        x = [mpmath.mpf(float(v)) for v in q[keep]]
        s0 = mpmath.fsum(c)
        centre = mpmath.fsum(ci * xi for ci, xi in zip(c, x)) / s0
        d = [xi - centre for xi in x]
        powers = [[di ** r for r in range(order + 1)] for di in d]
        m = [mpmath.fsum(ci * pw[r] for ci, pw in zip(c, powers)) / s0 for r in range(order + 1)]
        kappa, grads = [], []
        for n in range(1, order + 1):
            val = m[n]
            grad = [mpmath.mpf(0)] * (order + 1)
            grad[n] = mpmath.mpf(1)
            for k in range(1, n):
                comb = math.comb(n - 1, k - 1)
                val -= comb * kappa[k - 1] * m[n - k]
                for r in range(order + 1):
                    grad[r] -= comb * grads[k - 1][r] * m[n - k]
                grad[n - k] -= comb * kappa[k - 1]
            kappa.append(val)
            grads.append(grad)
        out = []
        for n in range(order):
            g = grads[n]
            var = mpmath.fsum(ci * (mpmath.fsum(g[r] * (pw[r] - m[r]) for r in range(1, order + 1))
                                    / s0) ** 2 for ci, pw in zip(c, powers))
            out.append(float(mpmath.sqrt(var)))
        return out


# ------------------------------------------------------------------- models

# ---------------------------------------------------------- the cumulant model

@dataclass(frozen=True)
class CumulantModel:
    """The truncated cumulant expansion
    Z(mu)/Z(0) = exp(sum_{n <= K} kappa_n (i mu)^n / n!) as a model beside
    the smoothings of ln rho (the series is the cumulant generating function,
    Kendall & Stuart vol. 1, 3.12).

    kappa      kappa_1, kappa_2, ... (mpf or float); may hold more orders than
               ``order`` (they are what :meth:`next_order_model` moves to)
    order      K, the highest order summed
    kappa_err  standard errors of the kappa (statistical), or None
    parity     'even' for a symmetric density: odd cumulants are taken as 0
    """

    kappa: tuple
    order: int
    kappa_err: tuple = None
    parity: str = "none"

    integrand = "cumulant-series"
    degree = None
    domain = None
    edge_free = True
    chi2 = float("nan")
    dof = 0

    def __post_init__(self):
        if not 1 <= self.order <= len(self.kappa):
            raise ValueError(f"order {self.order} needs {self.order} cumulants, "
                             f"{len(self.kappa)} given")
        object.__setattr__(self, "kappa", tuple(self.kappa))
        if self.kappa_err is not None:
            object.__setattr__(self, "kappa_err", tuple(self.kappa_err))

    @property
    def label(self):
        return f"cumulant:{self.order}"

    def used(self, n):
        """Whether kappa_n enters the sum (it is not known to vanish)."""
        k = self.kappa[n - 1]
        if self.parity == "even" and n % 2:
            return False
        if k == 0:
            return False
        if self.kappa_err is not None and self.kappa_err[n - 1] is not None:
            return abs(k) > ZERO_SIGMAS * self.kappa_err[n - 1]
        return True

    def next_order_model(self):
        """The model summed to the next order whose cumulant does not vanish
        (odd orders of a symmetric density, and cumulants within ZERO_SIGMAS
        errors of zero, are skipped), or None when no such order is known.
        Its difference from this model is the truncation (model) error."""
        for n in range(self.order + 1, len(self.kappa) + 1):
            if self.used(n):
                return dataclasses.replace(self, order=n)
        return None

    def exponent_terms(self):
        """[(n, kappa_n)] of the terms summed."""
        return [(n, self.kappa[n - 1]) for n in range(1, self.order + 1)
                if not (self.parity == "even" and n % 2) and self.kappa[n - 1] != 0]
