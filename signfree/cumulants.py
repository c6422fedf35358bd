"""Cumulants of the charge and the truncated cumulant expansion of the phase
factor,

    ln(Z(mu)/Z(0)) = sum_n kappa_n (i mu)^n / n!,

which converges only for |mu| below the nearest complex zero of Z(mu) (the
Lee-Yang zeros; see :mod:`signfree.zeros`). Three sources of cumulants:

* raw samples (:func:`sample_cumulants`): Fisher's k-statistics k_1..k_4
  (Fisher, Proc. London Math. Soc. 30, 199 (1930); the unbiased estimators of
  scipy.stats.kstat) and, above order 4, the cumulants of the empirical
  distribution, with errors by the jackknife over blocks (Quenouille 1956,
  Tukey 1958; blocks chosen by the blocking method of Flyvbjerg & Petersen,
  J. Chem. Phys. 91, 461 (1989));
* a histogram (:func:`histogram_cumulants`), with Sheppard's corrections for
  continuous binning (Sheppard, Proc. London Math. Soc. 29, 353 (1898));
* a smoothed model of ln rho (:func:`model_cumulants`): raw moments by
  Gauss-Legendre quadrature in Arb ball arithmetic (Johansson, IEEE Trans.
  Computers 2017), checked by node refinement.

Moments become cumulants by the recursion
kappa_n = m_n - sum_{k=1}^{n-1} C(n-1, k-1) kappa_k m_{n-k}
(Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, 3.14), which
cancels heavily for n > 2 and is therefore done at high precision: mpmath
for samples and histograms, Arb balls (whose radii show the cancellation)
for models.
"""
import dataclasses
import math
from dataclasses import dataclass

import gmpy2
import mpmath
import numpy as np
from gmpy2 import mpfr
from flint import acb, arb, ctx, fmpq, fmpz

from signfree import engine
from signfree.quadrature import chebyshev_at_nodes, gauss_legendre_rule
from signfree.results import Row

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
    replicas. ``q`` may also be a :class:`signfree.samples.Samples`.
    """
    from signfree.samples import Samples, blocking_analysis
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
    :func:`signfree.samples.samples_to_histogram`); charges on a lattice
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

def _mpf_to_arb(x):
    """An mpf, float or int as an arb, exactly when the precision allows."""
    if isinstance(x, (int, np.integer)):
        return arb(fmpz(int(x)))
    x = mpmath.mpf(x)
    if x == 0:
        return arb(0)
    if not mpmath.isfinite(x):
        raise ValueError(f"non-finite value {x}")
    sign, man, exp, _ = x._mpf_
    man, exp = (-int(man) if sign else int(man)), int(exp)
    if exp >= 0:
        return arb(fmpz(man << exp))
    return arb(fmpq(man, 1 << (-exp)))


def _profile(model):
    """(mean, variance, max |ln rho|) of the model density in double
    precision, on a fine Chebyshev grid: starting values only."""
    a, b = model.domain
    x = np.cos(np.linspace(0, np.pi, 4001))
    q = 0.5 * (a + b) + 0.5 * (b - a) * x
    p = np.asarray(model.log_density(q), dtype=float)
    wgt = np.exp(p - p.max()) * np.sqrt(np.clip(1 - x * x, 0, None))
    wgt /= wgt.sum()
    mean = float((wgt * q).sum())
    var = float((wgt * (q - mean) ** 2).sum())
    return mean, max(var, 1e-300), float(np.abs(p).max())


def _chebyshev_sums(model, order, prec, n, centre):
    """Power sums Int (q - centre)^r exp(p(q) - shift) dq / half-width, r <=
    order, by the n-point Gauss-Legendre rule at prec bits."""
    xs, ws = gauss_legendre_rule(n, prec)
    vals = chebyshev_at_nodes(model.coef, n, prec)
    with ctx.workprec(prec):
        shift = arb(max(float(v.mid()) for v in vals))
        a, b = model.domain
        half, mid = (arb(b) - arb(a)) / 2, (arb(a) + arb(b)) / 2
        c = _mpf_to_arb(centre)
        sums = [arb(0)] * (order + 1)
        for x, w, v in zip(xs, ws, vals):
            t = w * (v - shift).exp()
            d = mid + half * x - c
            for r in range(order + 1):
                sums[r] += t
                t *= d
    return sums


def _piecewise_sums(model, order, prec, m, centre):
    """Power sums Int (q - centre)^r exp(ln rho(q)) dq for a piecewise-linear
    ln rho, with an m-point Gauss-Legendre rule on every segment."""
    xs, ws = gauss_legendre_rule(m, prec)
    t, v = model.knots, model.values
    with ctx.workprec(prec):
        c = _mpf_to_arb(centre)
        shift = float(np.max(v))
        sums = [arb(0)] * (order + 1)
        for j in range(len(t) - 1):
            t0, t1 = arb(float(t[j])), arb(float(t[j + 1]))
            v0, v1 = arb(float(v[j])) - shift, arb(float(v[j + 1])) - shift
            h = (t1 - t0) / 2
            for x, w in zip(xs, ws):
                u = (1 + x) / 2
                e = w * h * (v0 + (v1 - v0) * u).exp()
                d = t0 + (t1 - t0) * u - c
                for r in range(order + 1):
                    sums[r] += e
                    e *= d
    return sums


def _kappa_balls(sums, centre):
    m = [s / sums[0] for s in sums]
    kappa = moments_to_cumulants(m)
    kappa[0] = kappa[0] + _mpf_to_arb(centre)
    return kappa


def model_cumulants(model, order, digits=30):
    """Cumulants kappa_1..kappa_order (mpmath mpf) of the density of a
    smoothed model (ChebyshevModel or PiecewiseModel) on its domain.

    Raw moments about the model's mean, Int (q - c)^n rho dq / Int rho dq,
    are Gauss-Legendre sums in Arb ball arithmetic (on the whole domain for
    a Chebyshev model, per segment for the piecewise model; nodes and ln rho
    at the nodes from :mod:`signfree.quadrature`); then the moment-cumulant
    recursion in the same balls. Each kappa_n is wanted to ``digits``
    digits relative to max(|kappa_n|, 10^-digits sigma^n), sigma^2 =
    kappa_2 (a cumulant below 10^-digits sigma^n counts as zero to that
    level). The precision is raised
    until the ball radii (rounding, including the cancellation of the
    recursion) meet that, and the node count until an n- and a 1.5 n-point
    rule (m and m + 8 per segment) agree to it (Trefethen, Approximation
    Theory and Approximation Practice, ch. 19)."""
    from signfree.piecewise import PiecewiseModel
    order = int(order)
    if order < 1:
        raise ValueError("cumulant order must be at least 1")
    centre, var, pmax = _profile(model)
    centre = mpmath.mpf(centre)
    a, b = model.domain
    half = 0.5 * (b - a)
    piecewise = isinstance(model, PiecewiseModel)
    spread = order * math.log10(half / math.sqrt(var) + 2.0)
    prec = engine.precision_bits(digits + spread, digits, pmax, 1000)
    if piecewise:
        n = order // 2 + 12
        step = lambda k: k + 8
        sums_of = lambda p, k: _piecewise_sums(model, order, p, k, centre)
    else:
        n = int(24 + 0.6 * len(model.coef) + 2 * order
                + 0.5 * math.sqrt(2.3 * (2 * digits + 10) / var) * half)
        step = lambda k: (3 * k + 1) // 2
        sums_of = lambda p, k: _chebyshev_sums(model, order, p, k, centre)
    tol = mpmath.mpf(10) ** (-digits)
    for _ in range(60):
        with ctx.workprec(prec):
            k_n = _kappa_balls(sums_of(prec, n), centre)
            n1 = step(n)
            k_n1 = _kappa_balls(sums_of(prec, n1), centre)
            sigma = engine.to_mpf(k_n1[1].mid()) if order >= 2 else mpmath.mpf(var)
            sigma = mpmath.sqrt(abs(sigma)) if sigma else mpmath.sqrt(var)
            need_prec = need_nodes = False
            for r, (x0, x1) in enumerate(zip(k_n, k_n1), 1):
                scale = max(abs(engine.to_mpf(x1.mid())), tol * sigma ** r)
                rad = engine.upper(arb(x1.rad()))
                if rad > tol * scale / 10:
                    need_prec = True
                elif engine.upper(x1 - x0) > tol * scale:
                    need_nodes = True
        if not (need_prec or need_nodes):
            with mpmath.workprec(prec):
                return [engine.to_mpf(x.mid()) for x in k_n1]
        if need_prec:
            prec = min(engine.MAX_PREC, int(prec * 1.5) // 64 * 64 + 64)
        else:
            n = n1
        if n > engine.MAX_NODES or prec >= engine.MAX_PREC:
            break
    raise ArithmeticError(f"cumulants to order {order} not resolved to {digits} digits "
                          f"within {engine.MAX_NODES} nodes and {engine.MAX_PREC} bits")


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

    def transform(self, mus, digits=12, certify=False):
        return self.transform_batch([self], mus, digits=digits, certify=certify)

    @staticmethod
    def transform_batch(models, mus, digits=12, certify=False):
        """Z(mu)/Z(0) = exp(sum kappa_n (i mu)^n / n!) in closed form, as acb
        balls; quad_err is the ball radius (rounding only: the closed form
        has no quadrature). The precision is raised until every ball carries
        ``digits`` digits. ``certify`` changes nothing: the balls already
        enclose the model's value."""
        mus = engine.as_fractions(mus)
        mu_max = max([abs(float(m)) for m in mus] + [1.0])
        size = 1.0
        for model in models:
            for n, k in model.exponent_terms():
                size = max(size, abs(float(k)) * mu_max ** n / math.factorial(n))
        prec = int(math.ceil(((digits + engine.GUARD_DIGITS) * engine.LOG2_10
                              + math.log2(size + 1.0) + 32) / 64) * 64)
        want = (digits + 2) * engine.LOG2_10
        while True:
            with ctx.workprec(prec):
                values = []
                for model in models:
                    terms = [(n, _mpf_to_arb(k) / math.factorial(n))
                             for n, k in model.exponent_terms()]
                    row = []
                    for mu in mus:
                        m = arb(fmpq(mu.numerator, mu.denominator))
                        re, im = arb(0), arb(0)
                        for n, c in terms:
                            t = c * m ** n
                            r = n % 4
                            if r == 0:
                                re += t
                            elif r == 1:
                                im += t
                            elif r == 2:
                                re -= t
                            else:
                                im -= t
                        row.append(acb(re, im).exp())
                    values.append(row)
            worst = min(min(z.rel_accuracy_bits() for z in row) for row in values)
            if worst >= want or prec >= engine.MAX_PREC:
                break
            prec = min(engine.MAX_PREC, int(prec + want - worst + 64) // 64 * 64)
        quad = [[engine.upper(acb(z.real.rad(), z.imag.rad())) for z in row] for row in values]
        resolved = [all(values[r][k].rel_accuracy_bits() >= want for r in range(len(models)))
                    for k in range(len(mus))]
        return engine.Transform(values=values, quad_err=quad, log_z0=[0.0] * len(models),
                                resolved=resolved, prec=prec, nodes=0,
                                method="cumulant-series", mus=mus)

    @classmethod
    def from_model(cls, model, order, digits=30, extra=2):
        """The expansion of a smoothed model to ``order``, with the cumulants
        computed ``extra`` orders further for :meth:`next_order_model`."""
        kappa = model_cumulants(model, order + extra, digits=digits)
        parity = getattr(model, "parity", "none")
        if parity == "even":
            kappa = [k if n % 2 == 0 else mpmath.mpf(0) for n, k in enumerate(kappa, 1)]
        return cls(kappa=tuple(kappa), order=order, parity=parity)


@dataclass(frozen=True)
class CumulantRow(Row):
    """A results row of a cumulant model: the Row statuses plus
    'beyond_radius' (|mu| at or past the convergence radius of the series,
    the distance to the nearest zero of Z; the truncated series is then no
    estimate of Z at all, whatever its model_err says). 'beyond_radius'
    takes precedence, and such a row shows no digits."""

    radius: object = None

    @property
    def beyond_radius(self):
        if self.radius is None:
            return False
        return mpmath.mpf(abs(self.mu).numerator) / abs(self.mu).denominator >= self.radius

    @property
    def status(self):
        if self.beyond_radius:
            return "beyond_radius"
        return super().status

    @property
    def last_digit(self):
        if self.beyond_radius:
            return None
        return super().last_digit

    @property
    def cancel_orders(self):
        if self.beyond_radius:
            return float(-mpmath.log10(self.magnitude + self.total_err))
        return super().cancel_orders


CUMULANT_STATUSES = ("ok", "edge_limited", "noise_limited", "unresolved", "beyond_radius")


def cumulant_rows(model, next_model, mus, radius=None, digits=12):
    """Rows (:class:`CumulantRow`) of a cumulant model over mu: value,
    quad_err (ball radius), model_err = |Z_K - Z_next| against
    ``next_model`` (None: no model error known), divided by
    1 - (|mu| / radius)^(order step) for a finite radius: by the
    Cauchy-Hadamard formula the cumulants grow like n! / radius^n, so the
    terms of the series shrink geometrically with that ratio and the whole
    omitted tail is about the first omitted term over (1 - ratio) (an
    asymptotic estimate, not a bound); stat_err from kappa_err by
    linear propagation, |Z| sum_n err_n |mu|^n / n! (an upper bound of the
    standard error of the linearised ln Z for any correlation of the kappa,
    by Minkowski's inequality), edge_err 0 (the expansion has no data range)
    and the status, 'beyond_radius' where |mu| >= ``radius``."""
    batch = [model] + ([next_model] if next_model is not None else [])
    tr = CumulantModel.transform_batch(batch, mus, digits=digits)
    rad = None if radius is None else mpmath.mpf(radius)
    rows = []
    with mpmath.workdps(digits + 10):
        for k, mu in enumerate(tr.mus):
            z = tr.values[0][k]
            value = mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))
            m = abs(mpmath.mpf(mu.numerator) / mu.denominator)
            model_err = None
            if next_model is not None:
                model_err = engine.upper(engine.difference(z, tr.values[1][k]))
                if rad is not None and mpmath.isfinite(rad) and m < rad:
                    # the terms shrink like (|mu| / R)^n (Cauchy-Hadamard):
                    # the omitted tail is about the first omitted term
                    # times 1 / (1 - (|mu| / R)^step)
                    model_err /= 1 - (m / rad) ** (next_model.order - model.order)
            stat = None
            if model.kappa_err is not None:
                stat = abs(value) * mpmath.fsum(
                    mpmath.mpf(model.kappa_err[n - 1] or 0) * m ** n / mpmath.factorial(n)
                    for n, _ in model.exponent_terms())
            rows.append(CumulantRow(mu=mu, value=value, quad_err=tr.quad_err[0][k],
                                    edge_err=mpmath.mpf(0), model_err=model_err,
                                    stat_err=stat, resolved=tr.resolved[k], degree=None,
                                    digits=digits, radius=rad))
    return rows
