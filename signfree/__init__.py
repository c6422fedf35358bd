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
    "read_density": "signfree.io.reading",
    "Density": "signfree.density",
    "InputError": "signfree.errors",
    "fit_chebyshev": "signfree.models.chebyshev",
    "fit_degree": "signfree.models.chebyshev",
    "ChebyshevModel": "signfree.models.chebyshev",
    "PiecewiseModel": "signfree.models.piecewise",
    "fit_rational": "signfree.models.rational",
    "RationalModel": "signfree.models.rational",
    "fit_two_component": "signfree.models.twophase",
    "TwoComponentModel": "signfree.models.twophase",
    "CumulantModel": "signfree.models.cumulant",
    "Lattice": "signfree.models.lattice",
    "LatticeModel": "signfree.models.lattice",
    "resolve_lattice": "signfree.analysis.lattice",
    "lattice_zeros": "signfree.analysis.fugacity",
    "sample_cumulants": "signfree.models.cumulant",
    "model_cumulants": "signfree.engine.moments",
    "transform": "signfree.engine",
    "Settings": "signfree.analysis.settings",
    "analyse": "signfree.analysis.analyse",
    "parse_mu_spec": "signfree.analysis.settings",
    "ResultTable": "signfree.analysis.results",
    "read_samples": "signfree.io.samples",
    "read_any": "signfree.io.samples",
    "binned_error": "signfree.io.samples",
    "find_zeros": "signfree.analysis.zeros",
    "compare": "signfree.analysis.compare",
    "make_figures": "signfree.report.figures",
    "html_report": "signfree.report.page",
    "ComplexMu": "signfree.analysis.mu_spec",
    "parse_observables": "signfree.analysis.weights",
    "read_imaginary_reference": "signfree.io.references",
    "extrapolate": "signfree.analysis.volumes",
    "free_energy_points": "signfree.analysis.volumes",
    "run_sweep": "signfree.report.sweep",
    "read_manifest": "signfree.report.manifest",
}

__all__ = sorted(_API)


def __getattr__(name):
    if name in _API:
        import importlib
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'signfree' has no attribute {name!r}")
