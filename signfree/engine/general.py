"""Engine routes for models whose ln rho is not an entire Chebyshev series.

Rational model (integrand 'rational-log'): ln rho has logarithmic branch
points at the poles z_j of its slope, off the real axis, so exp(ln rho +
i mu q) is analytic only in a neighbourhood of the axis. The data range is
cut into panels, bisected until the Bernstein ellipse of every panel with
parameter RHO_PANEL leaves every singularity out; on each panel an n-point
Gauss-Legendre rule errs by at most
    (64/15) h M(rho) rho^(-2n) / (rho^2 - 1)
for any 1 < rho below the nearest singularity's ellipse, M the largest
|integrand| on that ellipse (Trefethen, Approximation Theory and
Approximation Practice, ch. 19, Theorem 19.3, mapped to a panel of half
width h). n per panel comes from that bound (M sampled in double
precision on a few ellipses, the logarithms continued with their cuts
away from the axis), and is then checked by refinement: every panel's rule
and a 1.5 times larger one must agree on the first model at every mu, as
for the Chebyshev route. Values are sums in Arb ball arithmetic
(python-flint) at the precision the cancellation needs, so their radii
bound the rounding. ``certify`` uses acb.integral instead (its enclosure is
rigorous when the integrand reports where it is not analytic, which the
logarithms do through their ``analytic`` flag).

Two-component model (integrand 'two-component'): rho = exp(P_1) + exp(P_2),
so Z(mu)/Z(0) = (R_1 + w R_2) / (1 + w) with R_i each component's own
Chebyshev transform (engine.transform) and w = Int exp(P_2) / Int exp(P_1)
from the panel route at mu = 0. Where the components cancel each other
(near zeros of Z) each R_i is asked for as many more digits as cancel.
"""
import math

import mpmath
import numpy as np
from numpy.polynomial import chebyshev as C
from flint import acb, arb, arb_mat, ctx

from signfree.engine.balls import (MAX_NODES, MAX_PREC, abs_mid, arb_of, as_fractions,
                                   difference, exp_i, precision_bits, relative_radius, to_mpf,
                                   uniform_step, upper)
from signfree.engine.rules import gauss_legendre
from signfree.engine.transforms import Transform

RHO_PANEL = 2.0          # every panel's Bernstein ellipse leaves the singularities out
MAX_PANEL_NODES = 1024
MAX_TOTAL_NODES = 4 * MAX_NODES
DOUBLE_NODES = 48        # per panel, for the double-precision estimate of |Z|
FLOOR = 1e-12            # |Z| the double-precision estimate still resolves


class _Form:
    """ln rho of one model as (Chebyshev coefficients on the domain, poles,
    residues): a rational model as it is, a Chebyshev model without poles."""

    def __init__(self, model):
        self.coef = [float(c) for c in model.coef]
        self.domain = model.domain
        self.poles = [complex(z) for z in getattr(model, "poles", ())]
        self.residues = [complex(r) for r in getattr(model, "residues", ())]

    def continued(self, q):
        """ln rho at complex q in double precision, the logarithms' cuts
        running vertically away from the axis (rational.RationalModel)."""
        a, b = self.domain
        q = np.asarray(q, dtype=complex)
        out = C.chebval((2 * q - a - b) / (b - a), self.coef).astype(complex)
        for z, r in zip(self.poles, self.residues):
            out = out + r * (np.log(1j * (q - z)) - 0.5j * np.pi) \
                + np.conj(r) * (np.log(-1j * (q - np.conj(z))) + 0.5j * np.pi) - np.pi * r.imag
        return out

    def balls(self, qs, poly):
        """ln rho at the real arb nodes ``qs`` given the polynomial part
        ``poly`` there, at the current precision: 2 Re(a log(q - z)) - pi Im a
        per pole, exactly the function of RationalModel.log_density."""
        out = list(poly)
        for z, r in zip(self.poles, self.residues):
            zc, rc = acb(arb(z.real), arb(z.imag)), acb(arb(r.real), arb(r.imag))
            const = arb.pi() * arb(r.imag)
            out = [v + 2 * (rc * (acb(q) - zc).log()).real - const for v, q in zip(out, qs)]
        return out

    def ball_at(self, x, analytic):
        """ln rho at a complex ball x (for acb.integral)."""
        a, b = self.domain
        t = (2 * x - arb(a) - arb(b)) / (arb(b) - arb(a))
        b1 = b2 = acb(0)
        for c in reversed(self.coef[1:]):
            b1, b2 = 2 * t * b1 - b2 + arb(c), b1
        out = t * b1 - b2 + arb(self.coef[0])
        half_pi = arb.pi() / 2
        for z, r in zip(self.poles, self.residues):
            zc, rc = acb(arb(z.real), arb(z.imag)), acb(arb(r.real), arb(r.imag))
            up = (acb(0, 1) * (x - zc)).log(analytic=analytic) - acb(0, half_pi)
            down = (acb(0, -1) * (x - zc.conjugate())).log(analytic=analytic) + acb(0, half_pi)
            out = out + rc * up + rc.conjugate() * down - arb.pi() * arb(r.imag)
        return out


def _ellipse_rho(s):
    """The parameter of the Bernstein ellipse of [-1, 1] through s."""
    w = s + np.sqrt(s - 1) * np.sqrt(s + 1)
    m = abs(w)
    return max(m, 1 / m) if m > 0 else 1.0


def panels(domain, singularities):
    """[(left, right, rho_max)] covering the domain, bisected until every
    panel's ellipse parameter towards the nearest singularity is at least
    RHO_PANEL (rho_max: that parameter, inf without singularities)."""
    a, b = domain
    stack, out = [(a, b)], []
    while stack:
        u, v = stack.pop()
        m, h = 0.5 * (u + v), 0.5 * (v - u)
        rho = min((_ellipse_rho((z - m) / h) for z in singularities), default=math.inf)
        if rho >= RHO_PANEL or v - u < (b - a) * 2.0 ** -24:
            out.append((u, v, rho))
        else:
            stack.extend([(m, v), (u, m)])
    return sorted(out)


def _ladder(n):
    """Node counts shared between panels and runs: 8, 10, 13, 17, ..."""
    m = 8
    while m < n:
        m = -(-5 * m // 4)
    return m


def _profile(form, parts, mus):
    """Double-precision facts: the largest ln rho on the axis, Z(0)
    relative to exp of it, |Z(mu)/Z(0)| (Gauss-Legendre on the panels) and
    the variance of q."""
    x, w = np.polynomial.legendre.leggauss(DOUBLE_NODES)
    q = np.concatenate([0.5 * (u + v) + 0.5 * (v - u) * x for u, v, _ in parts])
    wq = np.concatenate([0.5 * (v - u) * w for u, v, _ in parts])
    L = form.continued(q).real
    top = float(L.max())
    f = wq * np.exp(L - top)
    z0 = float(f.sum())
    mean = float((f * q).sum() / z0)
    var = float((f * (q - mean) ** 2).sum() / z0)
    mags = np.array([abs(np.sum(f * np.exp(1j * float(m) * q))) / z0 for m in mus])
    return top, z0, mags, var, float(np.abs(L).max())


def _depths(mags, mus, var):
    """Decimal orders that cancel per mu: from the double-precision
    estimate where it resolves |Z|; beyond, -ln|Z| continued like k mu^2 with
    the smallest k of the outer half of the resolved mu (a Gaussian envelope
    through the last resolved values; for two peaks the variance of q would
    overestimate it by far), and from the variance when nothing past mu = 0
    is resolved. An estimate only: the ball radii and the refinement check
    raise precision and nodes where it falls short."""
    resolved = [(abs(float(m)), z) for m, z in zip(mus, mags) if z > FLOOR and m != 0]
    k = var / 2
    if resolved:
        top = max(m for m, _ in resolved)
        outer = [-math.log(z) / (m * m) for m, z in resolved if m >= top / 2 and z < 1]
        k = min(outer) if outer else k
    out = []
    for m, z in zip(mus, mags):
        if z > FLOOR:
            out.append(max(0.0, -math.log10(z)))
        else:
            out.append(max(-math.log10(FLOOR), k * float(m) ** 2 / math.log(10)))
    return out


def _node_counts(form, parts, top, z0, depth, digits, mu_max):
    """Per panel the node count the ellipse bound asks for, the error to
    stay below 10^-(depth + digits + 2) Z(0)."""
    theta = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    log_eps = -(depth + digits + 2) * math.log(10) + math.log(z0)
    out = []
    for u, v, rho_max in parts:
        m, h = 0.5 * (u + v), 0.5 * (v - u)
        cap = min(rho_max, 64.0)
        best = MAX_PANEL_NODES
        for f in (0.3, 0.55, 0.8, 0.95):
            rho = 1 + f * (cap - 1)
            wz = rho * np.exp(1j * theta)
            qz = m + h * 0.5 * (wz + 1 / wz)
            with np.errstate(all="ignore"):
                logm = np.max(form.continued(qz).real - top + mu_max * np.abs(qz.imag))
            if not np.isfinite(logm):
                continue
            need = (math.log(64 / 15 * h / (rho * rho - 1)) + logm - log_eps) / (2 * math.log(rho))
            best = min(best, max(need, 4))
        out.append(_ladder(best))
    return out


def _nodes(parts, counts, prec, domain):
    """Arb nodes q_j, weights and window coordinates for every panel."""
    a, b = domain
    qs, ws = [], []
    with ctx.workprec(prec):
        for (u, v, _), n in zip(parts, counts):
            xs, wts = gauss_legendre(n, prec)
            m, h = (arb(u) + arb(v)) / 2, (arb(v) - arb(u)) / 2
            qs.extend(m + h * x for x in xs)
            ws.extend(h * w for w in wts)
        xw = [(2 * q - arb(a) - arb(b)) / (arb(b) - arb(a)) for q in qs]
    return qs, ws, xw


def _polynomials(forms, xs, prec):
    """The Chebyshev part of every form at the window coordinates ``xs``:
    one ball matrix product of the coefficient rows with T_k(x_j), the
    table by the three-term recurrence with guard bits for the widening of
    balls it causes (at most (1 + sqrt 2)^k)."""
    degree = max(len(f.coef) for f in forms) - 1
    with ctx.workprec(prec + 2 * degree + 16):
        T = [[arb(1)] * len(xs)]
        if degree >= 1:
            T.append(list(xs))
        for _ in range(2, degree + 1):
            T.append([2 * x * t1 - t0 for x, t1, t0 in zip(xs, T[-1], T[-2])])
        cm = arb_mat([[arb(c) for c in f.coef] + [arb(0)] * (degree + 1 - len(f.coef))
                      for f in forms])
        P = cm * arb_mat(T)
    return [[P[r, j] for j in range(len(xs))] for r in range(len(forms))]


def _weights(forms, qs, ws, xw, prec):
    """Per row: w_j exp(ln rho(q_j) - shift), the shift, the exponent
    (double) and the sum (Z(0) / exp(shift))."""
    polys = _polynomials(forms, xw, prec)
    rows = []
    with ctx.workprec(prec + 16):
        for f, poly in zip(forms, polys):
            vals = f.balls(qs, poly)
            shift = arb(max(float(v.mid()) for v in vals))
            W = [w * (v - shift).exp() for w, v in zip(ws, vals)]
            rows.append((W, float(shift.mid()), [float(v.mid()) - float(shift.mid())
                                                 for v in vals], sum(W, arb(0))))
    return rows


def _fourier(W, qs, mus):
    """sum_j W[r][j] exp(i mu_k q_j) for every row and mu, as matrix
    products; on an even mu grid exp(i mu q) is built by rotation (|step| = 1,
    so ball radii grow only linearly)."""
    K = len(mus)
    h = uniform_step(mus)
    if h is not None:
        E = []
        for q in qs:
            z, step = exp_i(arb_of(mus[0]) * q), exp_i(arb_of(h) * q)
            row = [z]
            for _ in range(K - 1):
                row.append(row[-1] * step)
            E.append(row)
    else:
        ms = [arb_of(m) for m in mus]
        E = [[exp_i(m * q) for m in ms] for q in qs]
    Wm = arb_mat(W)
    re = Wm * arb_mat([[e.real for e in row] for row in E])
    im = Wm * arb_mat([[e.imag for e in row] for row in E])
    return [[acb(re[r, k], im[r, k]) for k in range(K)] for r in range(len(W))]


def _evaluate(forms, parts, counts, mus, prec, domain):
    """(ratios Z_r(mu)/Z_r(0) per row, log Z_r(0)) with the given rules."""
    qs, ws, xw = _nodes(parts, counts, prec, domain)
    rows = _weights(forms, qs, ws, xw, prec)
    with ctx.workprec(prec):
        cut = -(prec + 16) * math.log(2)
        used = [j for j in range(len(qs)) if max(r[2][j] for r in rows) > cut]
        gone = [j for j in range(len(qs)) if j not in set(used)]
        Z = _fourier([[+r[0][j] for j in used] for r in rows], [+qs[j] for j in used], mus)
        out = []
        for (W, shift, _, z0), zr in zip(rows, Z):
            dropped = sum((W[j] for j in gone), arb(0)).abs_upper() if gone else None
            if dropped is not None:
                zr = [z + acb(arb(0, dropped), arb(0, dropped)) for z in zr]
            out.append([z / z0 for z in zr])
        log_z0 = [shift + float(z0.log().mid()) for _, shift, _, z0 in rows]
    return out, log_z0


def singular_transform(models, mus, digits=12, certify=False, check_rows=None):
    """Z(mu)/Z(0) for models given by a Chebyshev series plus logarithmic
    terms (rational models; module docstring), as a :class:`Transform`.
    Rows past ``check_rows`` (replicas) ride along with the same rules and
    get no quad_err."""
    mus = as_fractions(mus)
    K = len(mus)
    domain = models[0].domain
    if any(m.domain != domain for m in models):
        raise ValueError("models in one batch must share their domain")
    check_rows = len(models) if check_rows is None else check_rows
    forms = [_Form(m) for m in models]
    sings = sorted({z for f in forms for p in f.poles for z in (p, p.conjugate())},
                   key=lambda z: (z.real, z.imag))
    parts = panels(domain, sings)
    top, z0, mags, var, pmax = _profile(forms[0], parts, mus)
    depths = _depths(mags, mus, var)
    mu_max = max(abs(float(m)) for m in mus)
    counts = _node_counts(forms[0], parts, top, z0, max(depths), digits, mu_max)
    prec = precision_bits(max(depths), digits, pmax, sum(counts))
    tol = mpmath.mpf(10) ** (-(digits + 1))
    resolved = [True] * K
    while True:
        values, log_z0 = _evaluate(forms, parts, counts, mus, prec, domain)
        worst = max(relative_radius(values[r][k]) for r in range(check_rows) for k in range(K))
        if worst > tol / 10 and prec < MAX_PREC:
            extra = 2 * prec if worst == mpmath.inf or worst >= 1 else \
                prec + float(mpmath.log(worst * 10 / tol, 2)) + 32
            prec = min(MAX_PREC, int(math.ceil(extra / 64) * 64))
            continue
        finer = [_ladder(1.5 * n) for n in counts]
        fine, _ = _evaluate(forms[:1], parts, finer, mus, prec, domain)
        diffs = [upper(difference(values[0][k], fine[0][k])) for k in range(K)]
        good = all(d <= tol * abs_mid(values[0][k]) for k, d in enumerate(diffs))
        if good or sum(finer) > MAX_TOTAL_NODES or max(finer) > MAX_PANEL_NODES:
            break
        counts = finer
    quad = [[None] * K for _ in models]
    for k in range(K):
        ok = diffs[k] <= tol * abs_mid(values[0][k]) and \
            relative_radius(values[0][k]) <= tol / 10
        resolved[k] = ok
        for r in range(check_rows):
            z = values[r][k]
            quad[r][k] = diffs[k] + upper(acb(z.real.rad(), z.imag.rad()))
    method = f"gauss-legendre on {len(parts)} panels"
    if certify:
        cert, cert_quad, cert_ok = _certified(forms[:check_rows], mus, digits, values, prec)
        values = cert + values[check_rows:]
        quad = cert_quad + quad[check_rows:]
        resolved = [a and b for a, b in zip(resolved, cert_ok)]
        method = "acb.integral"
    return Transform(values=values, quad_err=quad, log_z0=log_z0, resolved=resolved,
                     prec=prec, nodes=sum(counts), method=method, mus=mus)


def _certified(forms, mus, digits, estimate, prec):
    """Rigorous enclosures by acb.integral for every form and mu."""
    values, quad = [], []
    ok = [True] * len(mus)
    a, b = forms[0].domain
    with ctx.workprec(prec):
        for form in forms:
            shift = arb(float(np.max(form.continued(np.linspace(a, b, 1025)).real)))

            def integral(mu, tol):
                m = arb_of(mu)
                f = lambda x, analytic: (form.ball_at(x, analytic) - shift
                                         + acb(0, m) * x).exp()
                return acb.integral(f, arb(a), arb(b), abs_tol=tol,
                                    rel_tol=arb(2) ** (-prec + 8), eval_limit=10 ** 7)

            z0 = integral(0, arb(2) ** (-prec))
            row_v, row_q = [], []
            for k, mu in enumerate(mus):
                mag = abs_mid(estimate[0][k])
                tol = arb(mpmath.nstr(mag * mpmath.mpf(10) ** (-(digits + 3)), 5)) \
                    if mag > 0 else arb(2) ** (-prec)
                v = integral(mu, tol) / z0
                row_v.append(v)
                row_q.append(upper(acb(v.real.rad(), v.imag.rad())))
                if relative_radius(v) > mpmath.mpf(10) ** (-digits):
                    ok[k] = False
            values.append(row_v)
            quad.append(row_q)
    return values, quad, ok


def _mass_ratios(models, digits):
    """Per two-component model, w = Int exp(P_2) / Int exp(P_1) as an arb
    ball with a bound on its quadrature error (the panel rule checked by
    refinement), at the precision ``digits`` asks for."""
    firsts = [_Form(m.first) for m in models]
    seconds = [_Form(m.second) for m in models]
    domain = models[0].domain
    parts = panels(domain, [])
    counts = None
    prec = precision_bits(0, digits, max(float(np.abs(m.first.coef).sum() + np.abs(
        m.second.coef).sum()) for m in models), 256)
    for form in (firsts[0], seconds[0]):
        top, z0, _, _, _ = _profile(form, parts, [0])
        c = _node_counts(form, parts, top, z0, 0, digits, 0.0)
        counts = c if counts is None else [max(x, y) for x, y in zip(counts, c)]
    forms = firsts + seconds
    R = len(models)
    tol = mpmath.mpf(10) ** (-(digits + 2))
    while True:
        sums = _mass_sums(forms, parts, counts, prec, domain)
        fine = _mass_sums(forms, parts, [_ladder(1.5 * n) for n in counts], prec, domain)
        with ctx.workprec(prec):
            ratio = [sums[R + r] / sums[r] for r in range(R)]
            check = [fine[R + r] / fine[r] for r in range(R)]
        err = [upper(difference(x, y)) for x, y in zip(ratio, check)]
        if all(e <= tol * abs(to_mpf(x)) for e, x in zip(err, ratio)) or \
                sum(counts) > MAX_TOTAL_NODES:
            return ratio, err, prec
        counts = [_ladder(1.5 * n) for n in counts]


def _mass_sums(forms, parts, counts, prec, domain):
    """Int exp(ln rho) dq per form, in balls, on a common scale (exp of the
    largest value at any node of any form taken out)."""
    qs, ws, xw = _nodes(parts, counts, prec, domain)
    polys = _polynomials(forms, xw, prec)
    with ctx.workprec(prec + 16):
        vals = [f.balls(qs, poly) for f, poly in zip(forms, polys)]
        shift = arb(max(float(v.mid()) for row in vals for v in row))
        return [sum((w * (v - shift).exp() for w, v in zip(ws, row)), arb(0)) for row in vals]


def two_component_transform(models, mus, digits=12, certify=False, check_rows=None,
                            path="auto"):
    """Z(mu)/Z(0) of two-component models (module docstring), from the
    components' own transforms (along ``path``, as engine.transform), each
    asked for as many more digits as the two cancel."""
    from signfree import engine
    mus = as_fractions(mus)
    K = len(mus)
    check_rows = len(models) if check_rows is None else check_rows
    extra = 0
    while True:
        want = digits + extra
        t1 = engine.transform([m.first for m in models], mus, digits=want, certify=certify,
                              check_rows=check_rows, path=path)
        t2 = engine.transform([m.second for m in models], mus, digits=want, certify=certify,
                              check_rows=check_rows, path=path)
        ratio, ratio_err, wprec = _mass_ratios(models, want + 4)
        prec = max(t1.prec, t2.prec, wprec) + 32
        values, cancel = [], 0.0
        with ctx.workprec(prec):
            for r in range(len(models)):
                w = ratio[r]
                row = [(a + w * b) / (1 + w) for a, b in zip(t1.values[r], t2.values[r])]
                values.append(row)
                if r == 0:
                    for z, a, b in zip(row, t1.values[r], t2.values[r]):
                        mag = abs_mid(z)
                        top = abs_mid(a) + abs_mid(w * b)
                        if mag > 0:
                            cancel = max(cancel, float(mpmath.log10(top / (mag * abs_mid(1 + w)))))
                        else:
                            cancel = math.inf
        need = int(math.ceil(min(cancel, 60)))
        if need <= extra + 1 or extra >= 60:
            break
        extra = need
    quad = [[None] * K for _ in models]
    with ctx.workprec(prec):
        for r in range(check_rows):
            w = ratio[r]
            wm = abs_mid(w)
            scale = abs_mid(1 + w)
            for k in range(K):
                a, b, z = t1.values[r][k], t2.values[r][k], values[r][k]
                shift = upper(difference(b, a)) / scale ** 2
                quad[r][k] = ((t1.quad_err[r][k] + wm * t2.quad_err[r][k]) / scale
                              + ratio_err[r] * shift + upper(acb(z.real.rad(), z.imag.rad())))
    tol = mpmath.mpf(10) ** (-(digits + 1))
    resolved = [t1.resolved[k] and t2.resolved[k] and
                quad[0][k] <= 10 * tol * abs_mid(values[0][k]) for k in range(K)]
    log_z0 = [float(np.logaddexp(a, b)) for a, b in zip(t1.log_z0, t2.log_z0)]
    return Transform(values=values, quad_err=quad, log_z0=log_z0, resolved=resolved,
                     prec=prec, nodes=t1.nodes + t2.nodes,
                     method=f"{t1.method} per component", mus=mus)
