"""Gauss-Legendre rules and Chebyshev-series values at their nodes, in Arb
ball arithmetic, for the cumulant and zero computations.

Nodes and weights: Arb's arb_hypgeom_legendre_p_ui_root (Johansson & Mezzarobba,
SIAM J. Sci. Comput. 40, C726 (2018)), the mirrored half negated inside the
working precision so that every node carries the full precision.

Chebyshev values: p(x) = sum c_k T_k(x) = Re sum c_k w^k with
w = x + i sqrt(1 - x^2) = exp(i arccos x), by Horner's rule in w. Since
|w| = 1 the ball radii grow only linearly with the degree, whereas the
three-term recurrence T_{k+1} = 2 x T_k - T_{k-1} in ball arithmetic widens
the balls by up to (1 + sqrt 2)^k (the recurrence is stable in floating
point, but balls do not see its cancellations).
"""
from flint import acb, arb, ctx

_RULES = {}
_VALUES = {}
MAX_CACHED = 24


def gauss_legendre_rule(n, prec):
    """(nodes, weights) of the n-point Gauss-Legendre rule on [-1, 1], as
    arb balls accurate to about ``prec`` bits; cached."""
    key = (n, prec)
    if key not in _RULES:
        with ctx.workprec(prec + 16):
            half = [arb.legendre_p_root(n, k, weight=True) for k in range((n + 1) // 2)]
            xs = [x for x, _ in half] + [-x for x, _ in reversed(half[: n // 2])]
            ws = [w for _, w in half] + [+w for _, w in reversed(half[: n // 2])]
        if len(_RULES) >= MAX_CACHED:
            _RULES.pop(next(iter(_RULES)))
        _RULES[key] = (tuple(xs), tuple(ws))
    return _RULES[key]


def chebyshev_at_nodes(coef, n, prec):
    """sum_k coef[k] T_k(x_j) at the n Gauss-Legendre nodes (arb balls at
    ``prec`` bits); ``coef`` are floats (exact binary numbers); cached."""
    coef = tuple(float(c) for c in coef)
    key = (coef, n, prec)
    if key not in _VALUES:
        xs, _ = gauss_legendre_rule(n, prec)
        out = []
        with ctx.workprec(prec):
            cs = [arb(c) for c in coef]
            for x in xs:
                w = acb(x, ((1 - x) * (1 + x)).sqrt())
                s = acb(cs[-1])
                for c in reversed(cs[:-1]):
                    s = s * w + c
                out.append(s.real)
        if len(_VALUES) >= MAX_CACHED:
            _VALUES.pop(next(iter(_VALUES)))
        _VALUES[key] = out
    return _VALUES[key]
