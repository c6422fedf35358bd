"""Parts of the error budget that the data cannot pin down by themselves:
structure below the noise that the analytic continuation amplifies, and
what the finite data range hides.

Structure below the noise. Whatever the smoothing, the data determine
ln rho only to within their noise. A ripple eps cos(w q + phi) added to
ln rho changes every datum by eps times its response to exp(i w q): the
value itself for ln rho on a grid, the interval mean of the derivative for
slopes, (e^{i w q_hi} - e^{i w q_lo}) / width, and the bin average for
histograms, e^{i w q} sinc(w h / 2). From these responses follows the
least-squares uncertainty A_w of the ripple's amplitude in its least
constrained phase (a 2 x 2 normal matrix per w), and the chosen model's
normalised residuals give the component m_w the data actually show
(m_w^2 ~ 1 without a ripple). To first order the ripple changes
R(mu) = Z(mu)/Z(0) by
    (eps/2) [F(mu + w) + F(mu - w)] - R(mu) (eps/2) [F(w) + F(-w)]
(phases aside), with F = Z/Z(0) of the model at shifted frequencies: an eps
of the size the noise allows at w near mu changes R by about eps/2,
whatever the depth of R. The bound taken over the modes w_j = 2 pi j / L of
the range L (from the lowest up to mu_max plus the width of F, and no
higher than the data resolve, 0.9 pi / spacing; for a density symmetric
about 0 only the even ripple eps cos(w q), whose side bands add with one
phase) is
    STRUCTURE_SIGMAS sqrt( sum_j (m_j^2 + 1) A_j^2 G_j(mu)^2 ),
G_j(mu) = (|F(mu - w_j)| + |F(mu + w_j)|) / 2 + |R(mu)| |F(w_j)|, the modes
taken as independent (a linear propagation like that of a fit covariance).
|F| is computed in double precision by a fast Fourier transform of the
model density on an even grid; an error bound needs no more. Assumed:
ln rho has no ripple finer than the data resolve (above their Nyquist
frequency pi / spacing, where a ripple can hide between the points);
rows with |mu| beyond that frequency rest on this assumption and say so.

The range. Beyond [a, b] the data say nothing; ln rho is continued from its
last stretch (a quadratic fitted to the model over the outer tenth of the
range): with outward slope s < 0 and curvature c, an exponential tail
(c <= 0) holds rho(b)/|s|, a power-like tail (c > 0, exponent
alpha = s^2 / c, as for rho ~ q^-alpha) rho(b)/|s| alpha/(alpha - 1), and no
bound exists for alpha <= 1 or s >= 0. At mu the tail adds at most
min(mass |s| / |s + i mu|, 2 rho(b) / |mu|) (the second by the second mean
value theorem for a monotone tail), and the missing mass T shifts the
normalisation Z(0), so edge_err = tail(mu) + |R(mu)| T for mu != 0 (and 0 at
mu = 0, where R = 1 exactly).
"""
import math

import mpmath
import numpy as np

STRUCTURE_SIGMAS = 2.0
TAIL_FRACTION = 0.1
MODE_CHUNK = 64
F_FLOOR = 1e-7        # |F| below this (F(0) = 1) ends the band of F
AMPLITUDE_CAP = 1.0   # nats: a ripple the data can barely see is taken at most this large
RESOLUTION = 0.9      # of the Nyquist frequency: the ripples considered


# ------------------------------------------------------------ structure

def responses(density, omegas, keep=None):
    """Complex response of every fitted datum to delta ln rho = exp(i w q),
    rows over data, columns over ``omegas`` (module docstring)."""
    w = np.asarray(omegas, dtype=float)[None, :]
    if density.kind == "slopes":
        q, h = density.q[:, None], density.width[:, None]
        return (np.exp(1j * w * (q + h / 2)) - np.exp(1j * w * (q - h / 2))) / h
    q = density.q if keep is None else density.q[keep]
    r = np.exp(1j * w * q[:, None])
    if density.kind == "histogram":
        h = density.width if density.width is not None else np.ones_like(density.q)
        h = (h if keep is None else h[keep])[:, None]
        r = r * np.sinc(w * h / (2 * np.pi))
    return r


def mode_amplitudes(density, omegas, sigma, residuals, keep=None, even=False):
    """(A, m): per mode the amplitude uncertainty in its least constrained
    phase, and the component the residuals show in units of it. ``even``:
    only the even ripple eps cos(w q) (a density symmetric about q = 0)."""
    A = np.empty(len(omegas))
    m = np.empty(len(omegas))
    wgt = 1.0 / np.asarray(sigma, dtype=float) ** 2
    res = np.asarray(residuals, dtype=float) * wgt
    for start in range(0, len(omegas), MODE_CHUNK):
        part = omegas[start:start + MODE_CHUNK]
        r = responses(density, part, keep)
        c, s = r.real, r.imag
        n11 = (c * c * wgt[:, None]).sum(axis=0)
        n22 = (s * s * wgt[:, None]).sum(axis=0)
        n12 = (c * s * wgt[:, None]).sum(axis=0)
        det = n11 * n22 - n12 * n12
        tr = n11 + n22
        least = 0.5 * (tr - np.sqrt(np.maximum(tr * tr - 4 * det, 0.0)))
        with np.errstate(divide="ignore", invalid="ignore"):
            A[start:start + len(part)] = np.minimum(
                np.where(least > 0, 1 / np.sqrt(np.maximum(least, 1e-300)), np.inf), AMPLITUDE_CAP)
            g1 = (c * res[:, None]).sum(axis=0)
            g2 = (s * res[:, None]).sum(axis=0)
            alpha = (n22 * g1 - n12 * g2) / det
            beta = (n11 * g2 - n12 * g1) / det
            chi = (alpha * g1 + beta * g2) / 2
            if even:
                A[start:start + len(part)] = np.minimum(
                    np.where(n11 > 0, 1 / np.sqrt(np.maximum(n11, 1e-300)), np.inf),
                    AMPLITUDE_CAP)
                chi = g1 * g1 / n11
        m[start:start + len(part)] = np.sqrt(np.clip(np.nan_to_num(chi), 0, None))
    return A, m


def model_transform(model, top):
    """(nu, F(nu) exp(-i nu c), c) for nu in [0, top]: the model's phase
    factor F = Z(nu)/Z(0) in double precision with its turning at the mean c
    taken out (so that it interpolates well): :func:`weighted_transform`
    with O = 1."""
    return weighted_transform(model, None, top)


def residuals(density, model, correction=None, sigma=None):
    """(residuals in the measured quantity, the mask of fitted histogram
    bins): data minus the model's prediction (interval-mean slopes for
    slopes; ln rho, or the bin average for a corrected histogram, up to the
    free constant, which is removed: as the weighted mean with the fit's
    errors ``sigma`` when given, which is what a weighted fit's constant
    makes of it, else the plain mean)."""
    if density.kind == "slopes":
        h = density.width
        pred = (model.log_density(density.q + h / 2) - model.log_density(density.q - h / 2)) / h
        return density.value - pred, None
    q, y, _ = density.log_density_points()
    keep = density.value > 0 if density.kind == "histogram" else None
    if correction is not None and keep is not None:
        y = y - np.asarray(correction)[keep]
    res = y - model.log_density(q)
    if sigma is not None:
        w = 1 / np.asarray(sigma, dtype=float) ** 2
        return res - np.sum(w * res) / np.sum(w), keep
    return res - res.mean(), keep


def resolution(density):
    """The highest ripple frequency the data resolve: RESOLUTION times the
    Nyquist frequency pi / spacing of their points (the median spacing of
    the interval edges for slopes)."""
    if density.kind == "slopes":
        spacing = float(np.median(density.width))
    else:
        q = density.q if density.kind != "histogram" else density.q[density.value > 0]
        spacing = float(np.median(np.diff(q))) if len(q) > 1 else float(np.ptp(density.q))
    return RESOLUTION * np.pi / spacing


def ripple_modes(density, model, sigma, residuals, mu_top, keep=None):
    """(omegas, weights, F): the ripple modes w_j up to mu_top plus the band
    of F (and no higher than the data resolve), their weights
    (m_j^2 + 1) A_j^2, and F(x) = Z(x)/Z(0) of the model at real x as a
    vectorised function (double precision)."""
    a, b = model.domain
    step = 2 * np.pi / (b - a)
    probe = max(mu_top + 40 * step, 64 * step)
    nu, G, c = model_transform(model, probe)
    below = np.flatnonzero(np.abs(G) < F_FLOOR)
    band = nu[below[0]] if below.size else nu[-1]
    top = mu_top + band
    if top + band > probe:
        nu, G, c = model_transform(model, top + band)
    limit = resolution(density)
    omegas = step * np.arange(1, int(np.ceil(min(top, limit) / step)) + 1)
    if omegas.size == 0:
        return omegas, omegas, None
    A, m = mode_amplitudes(density, omegas, sigma, residuals, keep, even=is_even(model))

    def F(x):
        """F at real x (F(-x) = conj F(x) for a real density)."""
        ax = np.abs(x)
        g = np.interp(ax, nu, G.real, right=0.0) + 1j * np.interp(ax, nu, G.imag, right=0.0)
        g = g * np.exp(1j * ax * c)
        return np.where(x < 0, np.conj(g), g)

    return omegas, (m * m + 1) * A * A, F


def is_even(model):
    """The model is even in q about 0 (a stated or detected symmetry): its
    ripples are then even too."""
    a, b = model.domain
    return getattr(model, "parity", "none") == "even" and abs(a + b) <= 1e-9 * (b - a)


def pair(plus, minus, even):
    """|plus| + |minus| for a ripple of either phase, |plus + minus| for the
    even ripple eps cos(w q), whose two side bands come with one phase."""
    return np.abs(plus + minus) if even else np.abs(plus) + np.abs(minus)


def combine(weights, G, sigmas=STRUCTURE_SIGMAS):
    """sigmas sqrt(sum_j weights_j (G_j / 2)^2) as mpf (inf where blind)."""
    with np.errstate(invalid="ignore", over="ignore"):
        total = float(np.sqrt(np.sum(np.where(G > 0, weights * (G / 2) ** 2, 0.0))))
    return mpmath.mpf(sigmas * total) if np.isfinite(total) else mpmath.inf


def structure_errors(density, model, sigma, residuals, values, mus, keep=None):
    """Per mu, the bound of the module docstring on what a ripple the data
    do not exclude can change R(mu), as mpf (inf where the data are blind)."""
    mu = np.array([float(m) for m in mus])
    omegas, weights, F = ripple_modes(density, model, sigma, residuals, np.abs(mu).max(), keep)
    if F is None:
        return [mpmath.mpf(0)] * len(values)
    Fw, Fmw = F(omegas), F(-omegas)
    out = []
    for k, z in enumerate(values):
        if mu[k] == 0:
            out.append(mpmath.mpf(0))
            continue
        mag = abs(z)
        r = complex(z / mag) * float(mag) if mag > mpmath.mpf("1e-300") else 0j
        G = pair(F(mu[k] + omegas) - r * Fw, F(mu[k] - omegas) - r * Fmw, is_even(model))
        out.append(combine(weights, G))
    return out


# ---------------------------------------------------------------- range

def _outer_quadratic(model, end, inward):
    """(value, outward slope, curvature) of a quadratic in q fitted to the
    model's ln rho over the outer TAIL_FRACTION of its domain at ``end``."""
    a, b = model.domain
    span = TAIL_FRACTION * (b - a)
    q = np.linspace(end, end + inward * span, 41)
    p = np.asarray(model.log_density(q), dtype=float)
    t = (q - end) * -inward          # outward coordinate, <= 0 inside
    c2, c1, c0 = np.polyfit(t, p, 2)
    return float(model.log_density(end)), c1, 2 * c2


def tails(model, log_z0):
    """Per end of the domain: (rho(end) / Z(0), outward slope, tail mass /
    Z(0)), the mass infinite where no tail bound exists."""
    a, b = model.domain
    out = []
    for end, inward in ((a, 1.0), (b, -1.0)):
        p, s, c = _outer_quadratic(model, end, inward)
        rho = mpmath.exp(mpmath.mpf(p) - log_z0)
        if s >= 0:
            out.append((rho, s, mpmath.inf))
            continue
        mass = rho / -s
        if c > 0:
            alpha = s * s / c
            mass = mpmath.inf if alpha <= 1 else mass * alpha / (alpha - 1)
        out.append((rho, s, mass))
    return out


def edge_errors(model, log_z0, values, mus):
    """edge_err per mu (module docstring): what the density beyond the data
    range can add at mu, plus its shift of the normalisation."""
    if getattr(model, "edge_free", False):
        return [mpmath.mpf(0)] * len(mus)
    ends = tails(model, log_z0)
    hidden = sum((m for _, _, m in ends), mpmath.mpf(0))
    out = []
    for z, mu in zip(values, mus):
        m = abs(float(mu))
        if m == 0:
            out.append(mpmath.mpf(0))
            continue
        total = mpmath.mpf(0)
        for rho, s, mass in ends:
            near = mass * abs(s) / math.hypot(s, m) if mpmath.isfinite(mass) else mpmath.inf
            total += min(near, 2 * rho / m)
        out.append(total + abs(z) * hidden)
    return out


def hidden_mass(model, log_z0):
    """The weight beyond the data range, relative to Z(0) (may be inf)."""
    if getattr(model, "edge_free", False):
        return mpmath.mpf(0)
    return sum((m for _, _, m in tails(model, log_z0)), mpmath.mpf(0))


# ------------------------------------------------------------ piecewise

def piecewise_floor(model, log_z0, values, mus):
    """What the piecewise-linear reconstruction itself gets wrong, per mu:
    the smaller of its interpolation error and its cusp terms.

    Interpolation: on an interval of width h, a smooth ln rho with
    curvature c deviates from the chord by up to h^2 |c| / 8, on average
    h^2 |c| / 12, so the weight differs by about that fraction (c from the
    slope change at the knots), a bound for every mu (times 1 + |R| for the
    normalisation). Cusps: integrating by parts, each knot t_j where the
    slope jumps from s_{j-1} to s_j adds
    rho(t_j) (s_j - s_{j-1}) / ((s_{j-1} + i mu)(s_j + i mu)) to Z(mu), a
    term a smooth density does not have; its magnitudes summed bound the
    artefact, which near mu = 2 pi / h adds up coherently (the transform of
    a cusp decays only like 1/mu^2)."""
    t, v = np.asarray(model.knots, dtype=float), np.asarray(model.values, dtype=float)
    h = np.diff(t)
    s = np.diff(v) / h
    jump = np.abs(np.diff(s))                         # at the inner knots
    curv = jump / (0.5 * (h[1:] + h[:-1]))
    rho = [mpmath.exp(mpmath.mpf(float(x)) - log_z0) for x in v[1:-1]]
    interp = sum((r * float(hh * hh * c / 12 * hh) for r, hh, c in
                  zip(rho, 0.5 * (h[1:] + h[:-1]), curv)), mpmath.mpf(0))
    out = []
    for z, mu in zip(values, mus):
        m = float(mu)
        if m == 0:
            out.append(mpmath.mpf(0))
            continue
        den = np.hypot(s[:-1], m) * np.hypot(s[1:], m)
        cusp = sum((r * float(j / d) for r, j, d in zip(rho, jump, den)), mpmath.mpf(0))
        out.append(min(cusp, interp * (1 + abs(z))))
    return out


# ------------------------------------------------------------ ratios

def weighted_transform(model, weight, top):
    """(nu, N(nu) exp(-i nu c), c) for nu in [0, top]: N = Int O(q) rho
    e^{i nu q} / Int rho for a weight O (a function of q; None for O = 1),
    in double precision, by a trapezoid sum on an even q grid through a
    zero-padded FFT, with the turning at the mean c of rho taken out."""
    a, b = model.domain
    L = b - a
    h = min(L / 256, np.pi / (2 * max(top, 1e-12)))
    n = int(np.ceil(L / h)) + 1
    q = np.linspace(a, b, n)
    p = np.asarray(model.log_density(q), dtype=float)
    f = np.exp(p - p.max())
    f[0] *= 0.5
    f[-1] *= 0.5
    c = float((f * q).sum() / f.sum())
    pad = 1 << int(np.ceil(np.log2(16 * n)))
    g = f if weight is None else f * weight(q)
    spec = np.fft.ifft(g, pad) * pad          # sum_n g_n exp(+i nu (q_n - a))
    nu = 2 * np.pi * np.arange(pad) / (pad * (q[1] - q[0]))
    keep = nu <= top * 1.01 + 1e-12
    nu = nu[keep]
    return nu, spec[keep] * np.exp(1j * nu * (a - c)) / f.sum(), c


def ratio_structure(density, model, sigma, residuals, keep, weight, ratios, values, mus):
    """(bounds, ratios): per mu, the structure bound of a ratio
    <O>_mu = N_O(mu) / Z(mu): a ripple eps cos(w q + phi) changes it by
    (eps/2) [N(mu +- w) - <O> F(mu +- w)] / R(mu) (the normalisation Z(0)
    cancels in the ratio), bounded over the modes as for Z (module
    docstring). ``values`` are R(mu); ``ratios`` <O>_mu, or None to take
    them in double precision from the same transforms (good where R is well
    above the rounding of doubles, which is where a bound matters)."""
    mu = np.array([float(m) for m in mus])
    omegas, weights, F = ripple_modes(density, model, sigma, residuals, np.abs(mu).max(), keep)
    if F is None:
        return [mpmath.mpf(0)] * len(mus)
    a, b = model.domain
    nu, G, c = weighted_transform(model, weight, np.abs(mu).max() + omegas[-1] + 1e-9)

    def N(x):
        ax = np.abs(x)
        g = np.interp(ax, nu, G.real, right=0.0) + 1j * np.interp(ax, nu, G.imag, right=0.0)
        g = g * np.exp(1j * ax * c)
        return np.where(x < 0, np.conj(g), g)

    out, means = [], []
    for k in range(len(mus)):
        R = values[k]
        f0 = complex(F(np.array([mu[k]]))[0])
        o = complex(ratios[k]) if ratios is not None else (
            complex(N(np.array([mu[k]]))[0]) / f0 if f0 != 0 else 0j)
        means.append(o)
        if abs(R) == 0:
            out.append(mpmath.inf)
            continue
        G1 = pair(N(mu[k] + omegas) - o * F(mu[k] + omegas),
                  N(mu[k] - omegas) - o * F(mu[k] - omegas), is_even(model))
        out.append(combine(weights, G1) / abs(R))
    return out, means
