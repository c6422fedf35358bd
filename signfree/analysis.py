"""The whole path from a density to a results table, as one call:

    density = read_density("run.csv")
    result = analyse(density, parse_mu_spec("0:3:61"))
    print(result.table.text())

Each step is also available on its own (``fit_chebyshev``,
``PiecewiseModel.from_density``, ``model.transform``).
"""
import time
from dataclasses import dataclass
from fractions import Fraction

import mpmath

from signfree import engine
from signfree.chebyshev import fit_chebyshev
from signfree.piecewise import PiecewiseModel
from signfree.results import ResultTable, Row, density_rises_at_edge, edge_error

MODELS = ("chebyshev", "piecewise")


def parse_mu_spec(spec):
    """'0.1,0.5,1' (a list) or 'start:stop:count' (count evenly spaced values,
    both ends included) as exact fractions of the decimals written."""
    spec = spec.strip()
    try:
        if ":" in spec:
            parts = spec.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop = Fraction(parts[0].strip()), Fraction(parts[1].strip())
            count = int(parts[2].strip())
            if count < 1 or (count == 1 and start != stop):
                raise ValueError
            if count == 1:
                return [start]
            h = (stop - start) / (count - 1)
            return [start + k * h for k in range(count)]
        values = [Fraction(s.strip()) for s in spec.split(",")]
        if not values:
            raise ValueError
        return values
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"--mu {spec!r}: expected a comma list such as 0.1,0.5,1 "
                         "or start:stop:count such as 0:2:41") from None


@dataclass
class Analysis:
    """Everything one run produced: the density, the chosen model and how it
    was chosen, the engine's transform and the results table."""

    density: object
    model: object
    fit: object
    transform: object
    table: ResultTable
    seconds: float


def smoothing_models(density, model="chebyshev", degree=None, parity=None):
    """(central model, neighbour model for the truncation error or None, fit)."""
    if model == "chebyshev":
        fit = fit_chebyshev(density, degree=degree, parity=parity)
        return fit.model, fit.next_model, fit
    if model == "piecewise":
        piecewise = PiecewiseModel.from_density(density)
        return piecewise, piecewise.coarsened(), None
    raise ValueError(f"unknown model {model!r}; expected one of {', '.join(MODELS)}")


def analyse(density, mus, model="chebyshev", degree=None, digits=12, certify=False,
            volume=None, parity=None):
    """Smooth the density, compute Z(mu)/Z(0) for every mu and return an
    :class:`Analysis` whose table carries the error budget per mu."""
    start = time.perf_counter()
    central, neighbour, fit = smoothing_models(density, model, degree, parity)
    batch = [central] + ([neighbour] if neighbour is not None else [])
    tr = type(central).transform_batch(batch, mus, digits=digits, certify=certify)
    rows = []
    with mpmath.workdps(digits + 10):  # the values keep every digit asked for
        for k, mu in enumerate(tr.mus):
            z = tr.values[0][k]
            model_err = engine.upper(z - tr.values[1][k]) if len(batch) > 1 else None
            value = mpmath.mpc(engine.to_mpf(z.real), engine.to_mpf(z.imag))
            rows.append(Row(mu=mu, value=value, quad_err=tr.quad_err[0][k], model_err=model_err,
                            edge_err=edge_error(central, tr.log_z0[0], mu),
                            resolved=tr.resolved[k], degree=central.degree, digits=digits))
    volume = volume if volume is not None else density.volume
    info = {
        "model": central.label,
        "degree": central.degree,
        "parity": central.parity,
        "precision_bits": tr.prec,
        "precision_digits": int(tr.prec / engine.LOG2_10),
        "nodes": tr.nodes,
        "integration": tr.method,
        "domain": list(central.domain),
        "notes": [],
    }
    if fit is not None:
        info.update({
            "chi2": central.chi2, "dof": central.dof,
            "chi2_per_dof": central.chi2 / central.dof if central.dof else None,
            "degree_criterion": fit.criterion, "fit_consistent": fit.consistent,
            "model_err_against": neighbour.label if neighbour is not None else None,
            "parity_test": fit.parity_test, "errors_estimated_from_residuals": fit.noise_estimated,
        })
        info["notes"].extend(fit.notes)
    else:
        info["model_err_against"] = "piecewise through every other knot"
    if density_rises_at_edge(central):
        info["notes"].append("ln rho does not fall towards an end of the data range: the range "
                             "cuts off part of the density and edge_err is large")
    if volume is None:
        info["notes"].append("no volume given: delta_f is left empty (use --volume)")
    table = ResultTable(rows=rows, model_label=central.label, volume=volume, info=info)
    return Analysis(density=density, model=central, fit=fit, transform=tr, table=table,
                    seconds=time.perf_counter() - start)
