"""The Fourier engine: Z(mu)/Z(0) = Int rho(q) exp(i mu q) dq / Int rho(q) dq for
a batch of models and many mu at once, in Arb ball arithmetic at the precision
the cancellation needs.

    from signfree import engine
    tr = engine.transform([model], mus, digits=20)   # -> engine.Transform

Modules:
  balls          conversions, exact differences, the precision rule
  rules          Gauss-Legendre rules (cached) and Chebyshev values at nodes
  transforms     the batch Gauss-Legendre route for an entire ln rho
  certification  rigorous enclosures by acb.integral
  closed_forms   piecewise-linear ln rho (exact segments), cumulant series
  general        rational ln rho (panels around its branch points) and
                 two-component densities (sums of Chebyshev transforms)
  moments        cumulants of a model's density by quadrature
  complex_mu     Z and Z' at complex mu (for zeros and cumulant radii)
  sums           exact sums over a charge lattice (theta terms, magnetisation)

The engine takes models through their shared interface: each model names the
form of its integrand (``model.integrand``), and :func:`transform` sends the
batch to the route for that form. A new form of model gets a route here.
"""
from signfree.engine.balls import (GUARD_DIGITS, LOG2_10, MAX_NODES, MAX_PREC, abs_mid,
                                   as_fractions, difference, mpf_to_arb, precision_bits, to_mpf,
                                   uniform_step, upper)
from signfree.engine.transforms import Transform


def transform(models, mus, digits=12, certify=False, check_rows=None, gradient=(),
              path="auto"):
    """Z(mu)/Z(0) for every model of a batch (rows) and every mu (columns),
    as a :class:`Transform` (values with their quadrature-plus-rounding
    bounds). All models of a batch share one integrand form and domain.

    ``check_rows``: the first rows whose digits and quadrature are checked
    (the rest, such as replicas, ride along with the same rule);
    ``gradient``: coefficient indices whose derivatives dZ/dc_k are wanted
    (Chebyshev exponents only); ``certify``: rigorous acb.integral
    enclosures where the route has a quadrature error at all; ``path``:
    'auto' (each mu along the path through the saddle with the smallest
    cancellation, :mod:`signfree.engine.paths`) or 'real' (the real axis
    only, the cross-check)."""
    forms = {getattr(m, "integrand", None) for m in models}
    if len(forms) != 1:
        raise ValueError(f"one batch holds one integrand form, got {sorted(map(str, forms))}")
    form = forms.pop()
    if form == "chebyshev-exponent":
        from signfree.engine.transforms import chebyshev_transform
        return chebyshev_transform(models, mus, digits=digits, certify=certify,
                                   check_rows=check_rows, gradient=gradient, path=path)
    if form == "lattice-sum":
        from signfree.engine.sums import lattice_transform
        return lattice_transform(models, mus, digits=digits, check_rows=check_rows,
                                 gradient=gradient)
    if gradient:
        raise ValueError(f"models of form {form!r} have no coefficients to differentiate")
    if form == "piecewise-linear":
        from signfree.engine.closed_forms import segment_transform
        return segment_transform(models, mus, digits=digits)
    if form == "rational-log":
        from signfree.engine.general import singular_transform
        return singular_transform(models, mus, digits=digits, certify=certify,
                                  check_rows=check_rows)
    if form == "two-component":
        from signfree.engine.general import two_component_transform
        return two_component_transform(models, mus, digits=digits, certify=certify,
                                       check_rows=check_rows, path=path)
    if form == "cumulant-series":
        from signfree.engine.closed_forms import cumulant_series_transform
        return cumulant_series_transform(models, mus, digits=digits)
    raise ValueError(f"no engine route for models of form {form!r}")


__all__ = ["GUARD_DIGITS", "LOG2_10", "MAX_NODES", "MAX_PREC", "Transform", "abs_mid",
           "as_fractions", "difference", "mpf_to_arb", "precision_bits", "to_mpf", "transform",
           "uniform_step", "upper"]
