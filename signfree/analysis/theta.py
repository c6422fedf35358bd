"""Observables of the theta world from the distribution of a lattice charge
at theta = 0, with their errors through the same chain as the phase factor:

    f(theta) - f(0) = -ln(Z(theta)/Z(0)) / V = (chi_t theta^2 / 2)(1 + b_2 theta^2 + ...),
    chi_t = <Q^2>_c / V,   b_2 = -<Q^4>_c / (12 <Q^2>_c)

(the standard expansion of the theta dependence; <Q^n>_c are the cumulants
of P(Q), so that <Q^2>_c = <Q^2> for a symmetric P). The cumulants are
moments of positive weights at the lattice points: they do not cancel the
way the phase factor does, and double precision with moments about the
mean suffices (kappa_4 = mu_4 - 3 mu_2^2 loses about log10 V digits).

Errors: the spread over replica resamples (jackknife, bootstrap), central
differences along the independent directions of a fit covariance, or, for
independent errors sigma_j of the measured ln P_j, the linear propagation
var g = sum_j sigma_j^2 (dg/d ln P_j)^2 with
dmu_2/d ln P_j = w_j ((Q_j - m)^2 - mu_2) and
dmu_4/d ln P_j = w_j ((Q_j - m)^4 - mu_4 - 4 mu_3 (Q_j - m)) (w normalised);
for slopes summed along the chain, dg/d slope_i = width_i sum_{j > i} dg/d ln P_j.
"""
import math

import numpy as np

from signfree.analysis.uncertainty import spread


def _arrays(model, tails=False):
    """(normalised weights, charges) of a lattice model; with ``tails`` the
    range is continued geometrically beyond each end as in the tail bound of
    the phase factor (ln P with its slope at the end; a density that does not
    fall there continues flat for as many points as the range holds)."""
    w = model.weights()
    q = model.lattice.points()
    if tails and not model.complete:
        s = float(model.lattice.step)
        lo, hi = model.edge_slopes()
        finite = np.flatnonzero(w > 0)
        parts_w, parts_q = [w], [q]
        for j, slope, sign in ((finite[0], -lo, -1), (finite[-1], hi, 1)):
            r = math.exp(max(min(slope * s, 700.0), -700.0))
            k = np.arange(1, 10 * len(q) + 1)
            tail = w[j] * (r ** k if r < 1 else np.ones_like(k, dtype=float))
            if r >= 1:
                tail = tail[:len(q)]
            parts_w.append(tail)
            parts_q.append(q[j] + sign * s * np.arange(1, len(tail) + 1))
        w, q = np.concatenate(parts_w), np.concatenate(parts_q)
    return w / w.sum(), q


def _moments(model, tails=False):
    """(w normalised, Q - mean, mu_2, mu_3, mu_4) of a lattice model's weights."""
    w, q = _arrays(model, tails)
    d = q - float((w * q).sum())
    return w, d, float((w * d ** 2).sum()), float((w * d ** 3).sum()), float((w * d ** 4).sum())


def _values(model, volume, tails=False):
    _, _, m2, _, m4 = _moments(model, tails)
    k4 = m4 - 3 * m2 * m2
    out = {"kappa2": m2, "kappa4": k4, "b2": -k4 / (12 * m2) if m2 > 0 else math.nan}
    out["chi_t"] = m2 / volume if volume else None
    return out


def _gradients(model, volume):
    """d(observable)/d ln P_j per lattice point."""
    w, d, m2, m3, m4 = _moments(model)
    g2 = w * (d ** 2 - m2)
    g4 = w * (d ** 4 - m4 - 4 * m3 * d) - 6 * m2 * g2
    k4 = m4 - 3 * m2 * m2
    out = {"kappa2": g2, "kappa4": g4, "b2": -(g4 * m2 - k4 * g2) / (12 * m2 * m2)}
    out["chi_t"] = g2 / volume if volume else None
    return out


NAMES = ("chi_t", "b2", "kappa2", "kappa4")


def theta_observables(central, volume=None, resamples=None, method=None, directions=None,
                      point_sigma=None, slopes=False, neighbours=()):
    """chi_t, b_2 and the cumulants kappa_2, kappa_4 of the central model,
    each with its error budget, as a dict ready for summary.json:
    statistical (module docstring; None where no route gives one), model
    (the largest change to a neighbouring Chebyshev degree), edge (the
    change when the range is continued by the geometric tails), their sum,
    and a status as for the phase factor."""
    values = _values(central, volume)
    errors = dict.fromkeys(NAMES)
    if resamples:
        rows = [_values(m, volume) for m in resamples]
        for name in NAMES:
            if values[name] is not None:
                errors[name] = float(spread(method, [[r[name]] for r in rows])[0])
    elif directions:
        acc = dict.fromkeys(NAMES, 0.0)
        for lo, hi, h in directions:
            a, b = _values(lo, volume), _values(hi, volume)
            for name in NAMES:
                if values[name] is not None:
                    acc[name] += ((b[name] - a[name]) / h) ** 2
        errors = {name: math.sqrt(acc[name]) if values[name] is not None else None
                  for name in NAMES}
    elif point_sigma is not None:
        grads = _gradients(central, volume)
        sigma = np.asarray(point_sigma, dtype=float)
        for name in NAMES:
            g = grads[name]
            if g is None:
                continue
            if slopes:
                # d/d slope_i = width_i * sum_{j > i} d/d ln P_j
                g = float(central.lattice.step) * np.cumsum(g[::-1])[::-1][1:]
            errors[name] = float(math.sqrt(float(np.sum((sigma * g) ** 2))))
    others = [_values(m, volume) for m in neighbours]
    extended = _values(central, volume, tails=True)
    out = {"expansion": "f(theta) - f(0) = (chi_t theta^2 / 2)(1 + b2 theta^2 + ...)",
           "chi_t_is": "<Q^2>_c / V" if volume else "needs the volume"}
    for name in NAMES:
        v = values[name]
        out[name] = v
        out[name + "_err"] = errors[name]
        if v is None:
            continue
        model = max((abs(o[name] - v) for o in others), default=None)
        edge = abs(extended[name] - v)
        total = sum(e for e in (errors[name], model, edge) if e is not None)
        out[name + "_model_err"] = model
        out[name + "_edge_err"] = edge
        out[name + "_total_err"] = total
        out[name + "_status"] = _status(v, errors[name], model, edge, total)
    return out


def _status(value, stat, model, edge, total):
    """As for the phase factor: a number whose errors reach its size is
    not a measurement; the largest error names the reason."""
    if not math.isfinite(value) or total < abs(value):
        return "ok" if math.isfinite(value) else "unresolved"
    parts = {"noise_limited": stat or 0.0, "unresolved": model or 0.0, "edge_limited": edge}
    return max(parts, key=parts.get)


def theta_line(theta):
    """The printed headline of the theta observables."""
    parts = []
    for name, label in (("chi_t", "chi_t"), ("b2", "b_2")):
        if name == "chi_t" and theta.get("chi_t") is None:
            name, label = "kappa2", "<Q^2>_c"
        text = f"{label} = " + with_error(theta[name], theta.get(name + "_total_err"))
        status = theta.get(name + "_status")
        parts.append(text + ("" if status in (None, "ok") else f" [{status}]"))
    return ("theta: " + ", ".join(parts) + "  (f(theta) - f(0) = chi_t theta^2/2 (1 + b_2 "
            "theta^2 + ...); errors: statistical + model + edge)")


def with_error(value, err):
    """'value(err)' style text: value rounded at the error's second digit."""
    if value is None or not math.isfinite(value):
        return "n/a"
    if not err or not math.isfinite(err):
        return f"{value:.6g}"
    last = int(math.floor(math.log10(err))) - 1
    decimals = max(0, -last)
    return f"{value:.{decimals}f} +- {err:.2g}" if decimals < 12 else f"{value:.3e} +- {err:.2g}"
