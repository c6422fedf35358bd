"""signfree: phase factors Z(mu)/Z(0) and free-energy differences from a
measured density of states, at high precision, with an error budget.

The flow is read -> density -> smoothing model -> Fourier engine -> results:

    import signfree
    density = signfree.read_density("run.csv")
    result = signfree.analyse(density, signfree.parse_mu_spec("0:3:61"))
    print(result.table.text())

Names are loaded on first use, so that ``import signfree`` stays light.
"""
__version__ = "0.1.0"

_API = {
    "read_density": "signfree.reading",
    "Density": "signfree.density",
    "InputError": "signfree.errors",
    "fit_chebyshev": "signfree.chebyshev",
    "fit_degree": "signfree.chebyshev",
    "ChebyshevModel": "signfree.chebyshev",
    "PiecewiseModel": "signfree.piecewise",
    "analyse": "signfree.analysis",
    "parse_mu_spec": "signfree.analysis",
    "ResultTable": "signfree.results",
    "read_samples": "signfree.samples",
    "read_any": "signfree.samples",
    "binned_error": "signfree.samples",
    "sample_cumulants": "signfree.cumulants",
    "model_cumulants": "signfree.cumulants",
    "CumulantModel": "signfree.cumulants",
    "find_zeros": "signfree.zeros",
    "compare": "signfree.compare",
    "make_figures": "signfree.report",
    "html_report": "signfree.report",
}

__all__ = sorted(_API)


def __getattr__(name):
    if name in _API:
        import importlib
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'signfree' has no attribute {name!r}")
