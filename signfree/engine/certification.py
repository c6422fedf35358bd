"""Rigorous enclosures of the Fourier integral of a Chebyshev model by Arb's
``acb.integral`` (Petras' adaptive Gauss-Legendre with error bounds from the
Bernstein ellipse; Johansson, Arb, IEEE Trans. Computers 2017, and
python-flint's documentation). The integrand exp(p(q) + i mu q) is entire,
so the enclosure is rigorous: ``certify=True`` replaces the refinement check.
Where the engine integrated along a path through the saddle
(:mod:`signfree.engine.paths`), each straight panel of that path gets its own
enclosure and the sum of the balls encloses the integral over [a, b] (Cauchy's
theorem), at the low precision the path needs.
"""
import mpmath
import numpy as np
from flint import acb, arb, ctx

from signfree import progress
from signfree.engine.balls import abs_mid, arb_of as _arb, relative_radius as _relative_radius, upper


def _clenshaw(coef, x):
    """sum_k c_k T_k(x) for an acb ball x (Clenshaw's recurrence)."""
    b1 = b2 = acb(0)
    for c in reversed(coef[1:]):
        b1, b2 = 2 * x * b1 - b2 + c, b1
    return x * b1 - b2 + coef[0]


def _path_of(groups, k):
    for g in groups or ():
        if g.lo <= k < g.hi:
            return g.path
    return None


def certified(models, mus, digits, estimate, prec, groups=None):
    """Rigorous enclosures by acb.integral (Petras' adaptive Gauss-Legendre
    with error bounds from the Bernstein ellipse, in Arb) for every model and
    mu; ``estimate`` (the batch values) sets the absolute tolerance;
    ``groups`` (from :func:`signfree.engine.paths.plan`): integrate mu_k
    panel by panel along its group's path instead of along [-1, 1]."""
    values, quad = [], []
    ok = [True] * len(mus)
    a, b = models[0].domain
    with ctx.workprec(prec):
        half, mid = (arb(b) - arb(a)) / 2, (arb(a) + arb(b)) / 2
        for model in models:
            coef = [arb(float(c)) for c in model.coef]
            shift = arb(float(np.max(model.log_density(np.linspace(a, b, 513)))))

            def integral(mu, tol, path=None):
                m = _arb(mu)
                f = lambda x, _: (_clenshaw(coef, x) - shift + acb(0, m) * (mid + half * x)).exp()
                if path is None:
                    return acb.integral(f, -1, 1, abs_tol=tol, rel_tol=arb(2) ** (-prec + 8),
                                        eval_limit=10 ** 7)
                part = tol / len(path.panels)
                total = sum((acb.integral(f, acb(p.start), acb(p.end), abs_tol=part,
                                          rel_tol=arb(2) ** (-prec + 8), eval_limit=10 ** 7)
                             for p in path.panels), acb(0))
                return acb(2 * total.real) if path.half else total

            z0 = integral(0, arb(2) ** (-prec))
            row_v, row_q = [], []
            for k, mu in enumerate(mus):
                progress.report("certifying by acb.integral: mu", k + 1, len(mus))
                mag = abs_mid(estimate[0][k])
                tol = arb(mpmath.nstr(mag * mpmath.mpf(10) ** (-(digits + 3)), 5)) \
                    if mag > 0 else arb(2) ** (-prec)
                v = integral(mu, tol, _path_of(groups, k)) / z0
                row_v.append(v)
                row_q.append(upper(acb(v.real.rad(), v.imag.rad())))
                if _relative_radius(v) > mpmath.mpf(10) ** (-digits):
                    ok[k] = False
            values.append(row_v)
            quad.append(row_q)
    return values, quad, ok

