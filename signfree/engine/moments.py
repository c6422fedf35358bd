"""Cumulants of a smoothed model's density by quadrature in Arb ball
arithmetic: raw moments Int (q - c)^n rho dq / Int rho dq as Gauss-Legendre
sums (on the whole domain for an entire ln rho, per segment for the
piecewise-linear model), then the moment-cumulant recursion
(Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, 3.14) in the
same balls, whose radii show the cancellation of the recursion.
"""
import math

import mpmath
import numpy as np
from flint import arb, ctx

from signfree.engine.balls import MAX_NODES, MAX_PREC, mpf_to_arb as _mpf_to_arb, precision_bits, to_mpf, upper
from signfree.engine.rules import chebyshev_at_nodes, gauss_legendre_rule
from signfree.models.cumulant import CumulantModel, moments_to_cumulants


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
    order = int(order)
    if order < 1:
        raise ValueError("cumulant order must be at least 1")
    centre, var, pmax = _profile(model)
    centre = mpmath.mpf(centre)
    a, b = model.domain
    half = 0.5 * (b - a)
    piecewise = model.integrand == "piecewise-linear"
    spread = order * math.log10(half / math.sqrt(var) + 2.0)
    prec = precision_bits(digits + spread, digits, pmax, 1000)
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
            sigma = to_mpf(k_n1[1].mid()) if order >= 2 else mpmath.mpf(var)
            sigma = mpmath.sqrt(abs(sigma)) if sigma else mpmath.sqrt(var)
            need_prec = need_nodes = False
            for r, (x0, x1) in enumerate(zip(k_n, k_n1), 1):
                scale = max(abs(to_mpf(x1.mid())), tol * sigma ** r)
                rad = upper(arb(x1.rad()))
                if rad > tol * scale / 10:
                    need_prec = True
                elif upper(x1 - x0) > tol * scale:
                    need_nodes = True
        if not (need_prec or need_nodes):
            with mpmath.workprec(prec):
                return [to_mpf(x.mid()) for x in k_n1]
        if need_prec:
            prec = min(MAX_PREC, int(prec * 1.5) // 64 * 64 + 64)
        else:
            n = n1
        if n > MAX_NODES or prec >= MAX_PREC:
            break
    raise ArithmeticError(f"cumulants to order {order} not resolved to {digits} digits "
                          f"within {MAX_NODES} nodes and {MAX_PREC} bits")


# ---------------------------------------------------------- the cumulant model


def cumulant_model_of(model, order, digits=30, extra=2):
    """The cumulant expansion of a smoothed model to ``order``, with the
    cumulants computed ``extra`` orders further (what
    :meth:`CumulantModel.next_order_model` moves to)."""
    kappa = model_cumulants(model, order + extra, digits=digits)
    parity = getattr(model, "parity", "none")
    if parity == "even":
        kappa = [k if n % 2 == 0 else mpmath.mpf(0) for n, k in enumerate(kappa, 1)]
    return CumulantModel(kappa=tuple(kappa), order=order, parity=parity)
