"""The error budget of a lattice sum beyond the replica routes, and the
report of what the integral would have missed.

* tail_bound: P beyond the measured range continued geometrically with the
  slope of ln P at each end, sum_{k >= 1} P(b) r^k = P(b) r / (1 - r),
  r = exp(slope * step), relative to Z(0); a density that does not fall at
  an end counts as much again as the range holds at the edge height.
* linear_errors: independent errors of the measured ln P_j (Poisson counts,
  1/sqrt(n_j), or stated errors) propagated to first order,
  var R = sum_j sigma_j^2 P_j^2 |e_j - R|^2 / Z0^2 with e_j = exp(i theta Q_j);
  for counts this is (1 - |R|^2) / N, the variance of direct reweighting.
  Slopes summed along the chain: var R = sum_i (w_i sigma_i)^2
  |sum_{j > i} P_j (e_j - R)|^2 / Z0^2.
* blocking_errors: raw samples, the blocking method of Flyvbjerg & Petersen,
  J. Chem. Phys. 91, 461 (1989) on the series cos(theta Q_t), sin(theta Q_t).
* resolution_errors: stored values known to delta_j in ln P move Z(0) and
  the numerator by at most E = sum_j P_j (exp(delta_j) - 1), so
  |dR| <= (1 + |R|) E / (Z0 - E).
* integral_gap: the Poisson summation formula (DLMF 1.8(iv)) says the sum
  differs from the integral of the same smooth P by the aliased terms; here
  the integral of the smoothed ln P is computed by Gauss-Legendre quadrature
  (nodes refined until an n- and a 1.5n-point rule agree to 1e-3 of the sum)
  and compared with the sum of the same model.
"""
import math

import mpmath
import numpy as np
from flint import acb, arb, arb_mat, ctx

from signfree import engine
from signfree.engine.balls import arb_of, exp_i, precision_bits, uniform_step
from signfree.engine.rules import chebyshev_matrix, gauss_legendre, on_ladder
from signfree.engine.sums import _evaluate, lattice_weights
from signfree.io.samples import blocking_analysis
from signfree.models.lattice import log_resolution

GAP_TOL = mpmath.mpf("1e-3")
GAP_NODES = 1200        # the report is a diagnosis; it gives up before the run does
GAP_BITS = 1024         # nor does it raise the precision past this


def direct_method(density, errors, samples=None):
    """The statistical-error route of the direct sum: 'jackknife' or
    'bootstrap' over replicas, 'blocking' for raw samples, 'poisson' for
    counts, 'stated' for stated or replica-scatter per-point errors, or
    'none'. 'auto' prefers the samples' time series, then replicas."""
    n_rep = len(density.replica_labels)
    if errors in ("jackknife", "bootstrap"):
        if n_rep < 2:
            raise ValueError(f"--errors {errors} needs at least 2 replicas; "
                             f"{density.source} has {max(n_rep, 1)}")
        return errors
    if errors == "none":
        return "none"
    if errors == "auto":
        if samples is not None:
            return "blocking"
        if n_rep >= 2:
            return "jackknife"
    if density.kind == "histogram":
        return "poisson"
    if density.error is not None:
        return "stated"
    return "none"


def tail_bound(model):
    """What the range can hide, relative to Z(0) (module docstring)."""
    if model.complete:
        return mpmath.mpf(0)
    lw = model.log_weights()
    finite = np.flatnonzero(np.isfinite(lw))
    top = lw[finite].max()
    log_z0 = top + math.log(np.exp(lw[finite] - top).sum())
    lo, hi = model.edge_slopes()
    s = float(model.lattice.step)
    total = mpmath.mpf(0)
    for j, slope in ((finite[0], -lo), (finite[-1], hi)):
        edge = mpmath.exp(mpmath.mpf(float(lw[j] - log_z0)))
        r = math.exp(max(min(slope * s, 700.0), -700.0))
        total += edge * (r / (1 - r) if r < 1 else model.lattice.count)
    return total


def _mpc(z):
    return mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))


def linear_errors(central, density, tr, method):
    """(stat error per theta or None without a transform, sigma of ln P_j
    per lattice point) for independent per-point errors (module
    docstring). Stated errors of ln P use the variance weights
    sigma_j^2 P_j^2 summed by the engine at the precision of the value."""
    n = central.lattice.count
    if method == "poisson":
        counts = np.array([float(c) for c in central.counts])
        sigma = np.where(counts > 0, 1.0 / np.sqrt(np.maximum(counts, 1e-300)), 0.0)
        if tr is None:
            return None, sigma
        N = mpmath.mpf(float(sum(central.counts)))
        out = []
        for z in tr.values[0]:
            r2 = abs(_mpc(z)) ** 2
            out.append(mpmath.sqrt(max(1 - r2, 0) / N))
        return out, sigma
    err = np.asarray(density.error, dtype=float)
    if density.kind == "slopes":
        return _slope_chain(central, density, tr), err
    sigma = np.zeros(n)
    sigma[central.lattice.index(density.q)] = err
    if tr is None:
        return None, sigma
    rows, _ = lattice_weights([central], tr.prec)
    with ctx.workprec(tr.prec):
        var_row = [w * w * arb(float(s)) ** 2 for w, s in zip(rows[0], sigma)]
        z0 = sum(rows[0], arb(0))
        A = sum(var_row, arb(0))
        B = _evaluate([var_row], central.lattice, tr.mus, tr.prec)[0]
        out = []
        for z, b in zip(tr.values[0], B):
            v = (A - 2 * (z.conjugate() * b).real + (z * z.conjugate()).real * A) / (z0 * z0)
            out.append(mpmath.sqrt(max(engine.to_mpf(v), 0)))
    return out, sigma


def _slope_chain(central, density, tr):
    """var R for slopes summed along the chain (module docstring)."""
    if tr is None:
        return None
    rows, _ = lattice_weights([central], tr.prec)
    P = rows[0]
    n = len(P)
    scale = np.asarray(density.width, float) * np.asarray(density.error, float)
    with ctx.workprec(tr.prec):
        chain = [[P[j] if j > i else arb(0) for j in range(n)] for i in range(n - 1)]
        z0 = sum(P, arb(0))
        S = _evaluate(chain, central.lattice, tr.mus, tr.prec)
        S0 = [sum(row, arb(0)) for row in chain]
        out = []
        for k, z in enumerate(tr.values[0]):
            total = mpmath.mpf(0)
            for i in range(n - 1):
                d = (S[i][k] - z * S0[i]) / z0
                total += float(scale[i]) ** 2 * abs(_mpc(d)) ** 2
            out.append(mpmath.sqrt(total))
    return out


def blocking_errors(samples, mus, values):
    """(error of the sample mean of exp(i theta Q) per theta, whether every
    blocking analysis reached its plateau): blocking of cos(theta Q_t) and
    sin(theta Q_t) within each chain, the chains combined with their shares
    of the total weight."""
    chains = samples.chains()
    totals = [float(len(q)) if w is None else float(np.sum(w)) for q, w in chains]
    whole = sum(totals)
    # the charges take few values: cos and sin by table look-up
    levels, where = np.unique(np.asarray(samples.q, dtype=float), return_inverse=True)
    pieces = [where[samples.replicas == lab] for lab in np.unique(samples.replicas)] \
        if samples.replicas is not None else [where]
    out, plateau = [], True
    for mu in mus:
        t = float(mu)
        var = 0.0
        for f in (np.cos, np.sin):
            table = f(t * levels)
            for (q, w), idx, tot in zip(chains, pieces, totals):
                if len(q) >= 2:
                    b = blocking_analysis(table[idx], w)
                    var += (tot / whole) ** 2 * b.error ** 2
                    plateau = plateau and (b.plateau or b.error == 0)
        out.append(mpmath.sqrt(var))
    return out, plateau


def resolution_errors(central, density, values):
    """First-order bound of what the stored resolution of ln P can move
    each value (module docstring); zeros for counts."""
    delta = log_resolution(density)
    if delta is None:
        return [mpmath.mpf(0)] * len(values)
    w = central.weights()
    E = float(np.sum(w * np.expm1(delta)) / np.sum(w))
    if E >= 1:
        return [mpmath.inf] * len(values)
    return [(1 + abs(_mpc(z))) * mpmath.mpf(E) / (1 - E) for z in values]


def _gl_values(base, n, mus, prec):
    """Int exp(p(q) + i mu q) dq / Int exp(p(q)) dq over the base model's
    domain by the n-point Gauss-Legendre rule, as acb balls."""
    xs, ws = gauss_legendre(n, prec)
    T = chebyshev_matrix(n, prec, base.degree)
    a, b = base.domain
    with ctx.workprec(prec):
        P = arb_mat([[arb(float(c)) for c in base.coef]]) * T
        shift = max(float(P[0, j].mid()) for j in range(n))
        W = [w * (P[0, j] - shift).exp() for j, w in enumerate(ws)]
        A, B = arb(a), arb(b)
        qs = [(A + B) / 2 + (B - A) / 2 * x for x in xs]
        z0 = sum(W, arb(0))
        h = uniform_step(mus)
        if h is not None:
            # exp(i mu_k q) by rotation along the even mu grid (|step| = 1)
            start = [exp_i(arb_of(mus[0]) * q) for q in qs]
            turn = [exp_i(arb_of(h) * q) for q in qs]
            cols = []
            for _ in mus:
                cols.append(start)
                start = [e * t for e, t in zip(start, turn)]
        else:
            cols = [[exp_i(arb_of(mu) * q) for q in qs] for mu in mus]
        Wm = arb_mat([W])
        re = Wm * arb_mat([[c[j].real for c in cols] for j in range(n)])
        im = Wm * arb_mat([[c[j].imag for c in cols] for j in range(n)])
        out = [acb(re[0, k], im[0, k]) / z0 for k in range(len(mus))]
    return out


def integral_gap(base, sums, mus, prec, usable, step):
    """How far the integral of the smoothed ln P (the continuous route) is
    from the lattice sum of the same model, relative to the sum, per theta
    (module docstring; only the thetas marked ``usable``, those whose sum
    is resolved); with a note naming the worst case."""
    # beyond pi / step the sum repeats while the integral only falls further:
    # the comparison within the first half period says it all, and costs least
    half_period = math.pi / float(step)
    usable = [u and abs(float(m)) <= half_period * (1 + 1e-12) for u, m in zip(usable, mus)]
    if not any(usable):
        return {"what": "no theta up to pi/step has an ok value to compare with", "rows": []}
    # a contiguous piece of the scan (an even grid stays even: rotation works)
    first = usable.index(True)
    last = len(usable) - usable[::-1].index(True)
    sums, mus, usable = sums[first:last], list(mus[first:last]), usable[first:last]
    a, b = base.domain
    half = 0.5 * (b - a)
    lw = base.log_density(np.linspace(a, b, 2001))
    w = np.exp(lw - lw.max())
    q = np.linspace(a, b, 2001)
    mean = float((w * q).sum() / w.sum())
    var = max(float((w * (q - mean) ** 2).sum() / w.sum()), 1e-12)
    mags = [abs(_mpc(z)) for z in sums]
    depth = max([float(-mpmath.log10(m)) for m, u in zip(mags, usable) if m > 0 and u] + [0.0])
    omega = max(abs(float(m)) for m, u in zip(mus, usable) if u) * half
    n = on_ladder(1.1 * (omega / 2 + math.sqrt(1.15 * (depth + 8)) * half / math.sqrt(var))
                  + 0.5 * base.degree + 16)
    # the gap is wanted to GAP_TOL of the sum at the deepest usable theta only
    prec = min(prec, precision_bits(depth, 4, float(np.abs(lw).max()), 2 * n), GAP_BITS)
    if n > GAP_NODES:
        return {"what": "the integral would need more than "
                        f"{GAP_NODES} nodes here; not compared", "rows": []}
    while True:
        n1 = on_ladder(1.5 * n)
        coarse = _gl_values(base, n, mus, prec)
        fine = _gl_values(base, n1, mus, prec)
        agree = [not u or engine.upper(engine.difference(c, f)) <= GAP_TOL * m
                 for c, f, m, u in zip(coarse, fine, mags, usable)]
        if all(agree) or on_ladder(1.5 * n1) > GAP_NODES:
            break
        n = n1
    rows, worst = [], None
    for mu, f, z, m, ok, u in zip(mus, fine, sums, mags, agree, usable):
        if not u:
            continue
        rel = ratio = None
        if ok and m > 0:
            rel = abs(_mpc(f) - _mpc(z)) / m
            ratio = abs(_mpc(f)) / m
        rows.append([float(mu), None if rel is None else float(rel),
                     None if ratio is None else float(ratio)])
        if rel is not None and (worst is None or rel > worst[1]):
            worst = (float(mu), rel, ratio)
    out = {"columns": ["mu", "|integral - sum| / |sum|", "|integral| / |sum|"],
           "what": "the integral of the smoothed ln P against the lattice sum of the same "
                   "model: the aliased terms of the Poisson summation formula that any "
                   "integral misses", "nodes": n1, "rows": rows}
    if worst is not None and worst[1] > mpmath.mpf("0.01"):
        out["note"] = (f"the integral of the smoothed density (the continuous route) would be "
                       f"off by {_times(worst[1], worst[2])} at mu = {worst[0]:g}: the aliased "
                       "terms of the Poisson summation formula, which no integral holds")
    return out


def _times(rel, ratio):
    if ratio < 0.5:
        if ratio == 0:
            return "100% (it gives 0)"
        return f"{100 * float(rel):.0f}% (it gives 1/{float(1 / ratio):.3g} of the sum)"
    if ratio > 2:
        return f"a factor of {float(ratio):.3g}"
    return f"{100 * float(rel):.2g}%"
