"""The numbers behind every observable: ratios <O>_mu = N_O / Z of weighted
Fourier integrals of one smoothing model and its neighbours and resamples,
with the error budget of a results row (the methods are described in
:mod:`signfree.analysis.observables`).
"""
import math
from dataclasses import dataclass
from fractions import Fraction
from functools import cached_property

import mpmath
import numpy as np
from flint import acb, acb_mat, arb, arb_mat, ctx, fmpq

from signfree.analysis import uncertainty
from signfree.analysis.moment_rows import radius, to_mpc, weight_rows
from signfree.analysis.results import error_string
from signfree.analysis.weights import chebyshev_product, evaluate, in_window

SUFFIXES = ("", "_imag", "_err", "_quad_err", "_model_err", "_edge_err", "_status")
INF = mpmath.inf
RANK = {"ok": 0, "edge_limited": 1, "noise_limited": 2, "misfit": 3, "unresolved": 4,
        "beyond_radius": 4}


@dataclass
class ObsValue:
    """One observable at one mu: value (mpc), its error budget and status."""

    value: object
    quad_err: object
    edge_err: object
    model_err: object = None
    stat_err: object = None
    scale: float = 0.0
    resolved: bool = True
    z_status: str = "ok"
    digits: int = 12
    dev: object = None      # complex deviations, sum |dev|^2 = stat_err^2
    structure_err: object = None

    @cached_property
    def total_err(self):
        return sum((e for e in (self.quad_err, self.model_err, self.edge_err, self.stat_err)
                    if e is not None), mpmath.mpf(0))

    @cached_property
    def size(self):
        """The size the errors are judged against: max(|value|, scale)."""
        return max(abs(self.value), mpmath.mpf(self.scale))

    @cached_property
    def status(self):
        """The worse of its own status and that of Z(mu) at the same mu: a
        ratio whose denominator is not determined (its distribution reaching
        zero, or the range hiding part of it) is not determined either."""
        own = self._own_status()
        return max(own, self.z_status, key=lambda s: RANK.get(s, 4))

    def _own_status(self):
        S = self.size
        if not self.resolved or self.quad_err >= S:
            return "unresolved"
        if self.model_err is not None and self.model_err >= S:
            noise = self.structure_err is not None and 2 * self.structure_err >= self.model_err
            return "noise_limited" if noise else "unresolved"
        if self.stat_err is not None and self.stat_err >= S:
            return "noise_limited"
        if self.edge_err >= S / 10:
            return "edge_limited"
        if self.total_err >= S:
            parts = {"noise_limited": self.stat_err, "unresolved": self.model_err,
                     "edge_limited": self.edge_err, "precision": self.quad_err}
            top = max((k for k in parts if parts[k] is not None), key=lambda k: parts[k])
            return "unresolved" if top == "precision" else top
        return "ok"

    @cached_property
    def last_digit(self):
        """Decimal exponent of the last supported digit, or None."""
        S, err = self.size, self.total_err
        if S == 0 or self.status == "unresolved" or err >= S:
            return None
        last = int(mpmath.floor(mpmath.log10(S))) - self.digits + 1
        if err > 0:
            last = max(last, int(mpmath.floor(mpmath.log10(err))))
        return last

    def part(self, x):
        last = self.last_digit
        if last is None:
            return ""
        if x == 0:
            return "0"
        nsig = int(mpmath.floor(mpmath.log10(abs(x)))) - last + 1
        return "0" if nsig < 1 else decimal(x, nsig)


def decimal(x, nsig):
    with mpmath.workdps(max(15, nsig + 5)):
        s = mpmath.nstr(x, max(1, nsig), min_fixed=-4, max_fixed=6, strip_zeros=False)
    return s.replace(".e", "e").replace("e+", "e").rstrip(".")


def cells(v):
    """The seven strings of one observable in one results row."""
    re_s, im_s = v.part(v.value.real), v.part(v.value.imag)
    return (re_s, im_s, error_string(v.stat_err), error_string(v.quad_err),
            error_string(v.model_err), error_string(v.edge_err), v.status)


def short(v):
    """'value +- total (status)' for the printed table."""
    re_s, im_s = v.part(v.value.real), v.part(v.value.imag)
    if not re_s:
        text = "(no digit)"
    elif im_s in ("", "0"):
        text = re_s
    elif re_s == "0":
        text = f"{im_s}i"
    else:
        text = f"{re_s}{'' if im_s.startswith('-') else '+'}{im_s}i"
    text += f" ±{error_string(v.total_err)}"
    return text if v.status == "ok" else f"{text} [{v.status}]"


# ---------------------------------------------------------------------------
# the numbers at one mu

def moment(wr, poly, i):
    """(<O>_mu as acb, quad error, edge error) of a polynomial weight."""
    u = in_window(poly, wr.model.domain)
    N, Z = wr.integral(u, i), wr.rows[0][i]
    with ctx.workprec(wr.prec + 32):
        M = N / Z
    zq, ze = wr.quad[i], wr.edge_error((1,), i)
    den = abs(to_mpc(Z)) - zq - ze
    if not den > 0 or not M.is_finite():
        return M, INF, INF
    m = abs(to_mpc(M))
    quad = (wr.quad_error(u, i) + m * zq) / den + radius(M)
    edge = (wr.edge_error(poly, i) + m * ze) / den
    return M, quad, edge


def observable_at(wr, obs, volume, i):
    """(value acb, quad error, edge error) of one observable at mu_i."""
    v = Fraction(volume)
    if obs.kind == "ratio":
        return moment(wr, obs.poly, i)
    if obs.kind == "n":
        M, q, e = moment(wr, (0, 1), i)
        with ctx.workprec(wr.prec + 32):
            return M / arb(fmpq(v.numerator, v.denominator)), q / volume, e / volume
    M1, q1, e1 = moment(wr, (0, 1), i)
    M2, q2, e2 = moment(wr, (0, 0, 1), i)
    with ctx.workprec(wr.prec + 32):
        chi = (M2 - M1 * M1) / arb(fmpq(v.numerator, v.denominator))
    m1 = abs(to_mpc(M1))
    return (chi, (q2 + 2 * m1 * q1 + q1 * q1) / volume + radius(chi),
            (e2 + 2 * m1 * e1 + e1 * e1) / volume)


def polynomials(obs):
    """The polynomial weights an observable is made of."""
    return {"n": [(0, 1)], "chi": [(0, 1), (0, 0, 1)]}.get(obs.kind, [obs.poly])


def combine_gradient(obs, grads, means, volume):
    """d f / d c_j (acb per j) from the gradients of its moments."""
    if obs.kind == "ratio":
        return grads[0]
    with ctx.workprec(256):
        v = arb(fmpq(Fraction(volume).numerator, Fraction(volume).denominator))
        if obs.kind == "n":
            return [g / v for g in grads[0]]
        return [(g2 - 2 * means[0] * g1) / v for g1, g2 in zip(grads[0], grads[1])]


def moment_gradients(wr, poly, ks):
    """d<O>_mu / dc_j = <O T_j>_mu - <O>_mu <T_j>_mu for j in ks, every mu:
    (per mu a list over j of acb, per mu <O> as acb), the numerators of all
    mu as one ball matrix product."""
    u = in_window(poly, wr.model.domain)
    K = len(wr.rows)
    S = []
    for j in ks:
        w = chebyshev_product(u, [Fraction(0)] * j + [Fraction(1)])
        S.append([w[k] if k < len(w) else Fraction(0) for k in range(K)])
    with ctx.workprec(wr.prec + 32):
        Sm = arb_mat([[arb(fmpq(c.numerator, c.denominator)) for c in row] for row in S])
        G = acb_mat([[wr.rows[k][i] for i in range(len(wr.mus))] for k in range(K)])
        P = acb_mat(Sm) * G
        out, means = [], []
        for i in range(len(wr.mus)):
            Z = wr.rows[0][i]
            M = sum((arb(fmpq(c.numerator, c.denominator)) * wr.rows[k][i]
                     for k, c in enumerate(u) if c != 0), acb(0)) / Z
            out.append([P[r, i] / Z - M * wr.rows[j][i] / Z for r, j in enumerate(ks)])
            means.append(M)
    return out, means


def _complex(z):
    """An acb midpoint as a Python complex (inf when out of range)."""
    if not z.is_finite():
        return complex(math.inf, 0)
    return complex(float(z.real.mid()), float(z.imag.mid()))


def deviations(method, central, samples):
    """Complex deviations d with sum |d|^2 the jackknife or bootstrap
    variance (uncertainty module docstring)."""
    x = np.array(samples, dtype=complex)
    n = len(x)
    if method == "jackknife":
        return math.sqrt((n - 1) / n) * (x - x.mean())
    return (x - x.mean()) / math.sqrt(n - 1)


def stat_from(dev):
    if dev is None:
        return None
    s = float(np.sqrt(np.sum(np.abs(dev) ** 2)))
    return INF if not math.isfinite(s) else mpmath.mpf(s)


def natural_scales(model, observables, volume):
    """Per observable the size its errors are judged against: the spread of
    q / V, kappa_2 / V, or <|O(q)|>, under the model's density at mu = 0
    (double precision on 2001 Chebyshev points)."""
    a, b = model.domain
    x = np.cos(np.linspace(0, np.pi, 2001))
    q = 0.5 * (a + b) + 0.5 * (b - a) * x
    p = model.log_density(q)
    w = np.exp(p - p.max()) * np.sqrt(1 - x * x)
    w /= w.sum()
    mean = float((w * q).sum())
    var = float((w * (q - mean) ** 2).sum())
    out = {}
    for o in observables:
        if o.kind == "n":
            out[o.name] = math.sqrt(var) / volume
        elif o.kind == "chi":
            out[o.name] = var / volume
        else:
            out[o.name] = float((w * np.abs([evaluate(o.poly, t) for t in q])).sum())
    return out


# ---------------------------------------------------------------------------
# a set of models at a set of mu

def stat_plan(analysis, settings, model):
    """(method, resample models, (ks, L) covariance factor) for ``model``,
    with the resamples of the analysis itself (same seed)."""
    density = analysis.density
    method = uncertainty.choose_method(density, settings.errors, model.label)
    if method in ("jackknife", "bootstrap"):
        seed = analysis.table.info.get("bootstrap_seed", settings.seed)
        values = uncertainty.resampled_values(density, method, settings.bootstrap_samples, seed)
        return method, uncertainty.resampled_models(density, model, values), None
    if method == "covariance":
        return method, None, uncertainty.coefficient_covariance(density, model)
    return method, None, None


def evaluate_set(model, neighbours, plan, mus, observables, volume, digits, transform=None,
                 min_order=0, collect=None):
    """Per observable a list over mu of (value mpc, quad, edge, model_err,
    dev, resolved, value acb), for the models of one degree. ``transform``
    maps a model to the model actually integrated (the tilt at complex mu);
    ``min_order``: rows of the central model wanted at least; ``collect``, a
    dict, receives the WeightRows of the central model, the neighbours and
    the resamples."""
    method, resamples, cov = plan
    tf = transform or (lambda m: m)
    order = max([o.order for o in observables] + [0])
    central_order = max(order, min_order)
    if cov is not None:
        central_order = max(central_order, max(cov[0]) + order)
    wr = weight_rows(tf(model), mus, central_order, digits)
    if collect is not None:
        collect.update(central=wr, neighbours=[], resamples=[])
    out = {o.name: [] for o in observables}
    for i in range(len(wr.mus)):
        for o in observables:
            z, q, e = observable_at(wr, o, volume, i)
            if not z.is_finite():
                out[o.name].append([mpmath.mpc(0), INF, INF, None, None, False, z])
                continue
            out[o.name].append([to_mpc(z), q, e, None, None, wr.resolved[i], z])
    for nb in neighbours:
        wn = weight_rows(tf(nb), mus, order, digits)
        if collect is not None:
            collect["neighbours"].append(wn)
        for o in observables:
            for i, rec in enumerate(out[o.name]):
                z = observable_at(wn, o, volume, i)[0]
                change = abs(to_mpc(z) - rec[0]) if z.is_finite() else INF
                rec[3] = max(rec[3] or mpmath.mpf(0), change)
    if resamples:
        samples = {o.name: [[] for _ in wr.mus] for o in observables}
        for m in resamples:
            wrs = weight_rows(tf(m), mus, order, digits)
            if collect is not None:
                collect["resamples"].append(wrs)
            for o in observables:
                for i in range(len(wrs.mus)):
                    samples[o.name][i].append(_complex(observable_at(wrs, o, volume, i)[0]))
        for o in observables:
            for i, rec in enumerate(out[o.name]):
                rec[4] = deviations(method, rec[0], samples[o.name][i])
    elif cov is not None:
        ks, L = cov
        for o in observables:
            parts = [moment_gradients(wr, poly, ks) for poly in polynomials(o)]
            for i, rec in enumerate(out[o.name]):
                g = combine_gradient(o, [p[0][i] for p in parts], [p[1][i] for p in parts],
                                     volume)
                grad = np.array([_complex(x) for x in g])
                rec[4] = L.T @ grad.real + 1j * (L.T @ grad.imag)
    return out, wr


