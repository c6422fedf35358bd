"""Fourier integrals that need no quadrature: the piecewise-linear ln rho,
integrated exactly segment by segment, and the truncated cumulant series in
closed form. Only rounding error remains; the precision is raised until the
balls carry the wanted digits.
"""
import math

import mpmath
import numpy as np
from flint import acb, arb, ctx, fmpq

from signfree.engine.balls import (GUARD_DIGITS, LOG2_10, MAX_PREC, arb_of as _arb,
                                   as_fractions, exp_i as _exp_i, mpf_to_arb, precision_bits,
                                   relative_radius as _relative_radius, upper)
from signfree.engine.transforms import Transform
from fractions import Fraction


def segment_transform(models, mus, digits=12):
    """Z(mu)/Z(0) for piecewise-linear ln rho, exact per segment:
    Int_{t_j}^{t_j + h_j} exp(v_j + s_j (q - t_j) + i mu q) dq
      = h_j exp(v_j + i mu t_j) expm1(z_j) / z_j,  z_j = (s_j + i mu) h_j.
    Only rounding error remains; the precision is raised until the balls
    carry ``digits``."""
    mus = as_fractions(mus)
    depth = 0.0
    prec = precision_bits(depth, digits, 1.0, 64)
    tol = mpmath.mpf(10) ** (-(digits + 2))
    while True:
        values, log_z0 = [], []
        with ctx.workprec(prec):
            for model in models:
                t, v = model.knots, model.values
                shift = float(np.max(v))
                seg = []
                for j in range(len(t) - 1):
                    h = arb(float(t[j + 1])) - arb(float(t[j]))
                    s = (arb(float(v[j + 1])) - arb(float(v[j]))) / h
                    seg.append((arb(float(t[j])), h, s, (arb(float(v[j])) - shift).exp()))

                def z_of(mu):
                    m = _arb(mu)
                    total = acb(0)
                    for t0, h, s, e in seg:
                        z = acb(s, m) * h
                        factor = h if (s == 0 and mu == 0) else z.expm1() / z * h
                        total += e * _exp_i(m * t0) * factor
                    return total

                z0 = z_of(Fraction(0))
                log_z0.append(shift + float(z0.real.log().mid()))
                values.append([z_of(mu) / z0 for mu in mus])
        rel = [max(_relative_radius(row[k]) for row in values) for k in range(len(mus))]
        worst = max(rel)
        if worst <= tol or prec >= MAX_PREC:
            break
        if worst == mpmath.inf or worst >= 1:
            prec = min(MAX_PREC, 2 * prec)
        else:
            prec = min(MAX_PREC, int(prec + float(mpmath.log(worst / tol, 2)) + 32))
    quad = [[upper(acb(z.real.rad(), z.imag.rad())) for z in row] for row in values]
    return Transform(values=values, quad_err=quad, log_z0=log_z0,
                     resolved=[r <= tol for r in rel], prec=prec, nodes=0,
                     method="exact-segments", mus=mus)


def cumulant_series_transform(models, mus, digits=12):
    """Z(mu)/Z(0) = exp(sum kappa_n (i mu)^n / n!) in closed form, as acb
    balls; quad_err is the ball radius (rounding only: the closed form
    has no quadrature). The precision is raised until every ball carries
    ``digits`` digits. ``certify`` changes nothing: the balls already
    enclose the model's value."""
    mus = as_fractions(mus)
    mu_max = max([abs(float(m)) for m in mus] + [1.0])
    size = 1.0
    for model in models:
        for n, k in model.exponent_terms():
            size = max(size, abs(float(k)) * mu_max ** n / math.factorial(n))
    prec = int(math.ceil(((digits + GUARD_DIGITS) * LOG2_10
                          + math.log2(size + 1.0) + 32) / 64) * 64)
    want = (digits + 2) * LOG2_10
    while True:
        with ctx.workprec(prec):
            values = []
            for model in models:
                terms = [(n, mpf_to_arb(k) / math.factorial(n))
                         for n, k in model.exponent_terms()]
                row = []
                for mu in mus:
                    m = arb(fmpq(mu.numerator, mu.denominator))
                    re, im = arb(0), arb(0)
                    for n, c in terms:
                        t = c * m ** n
                        r = n % 4
                        if r == 0:
                            re += t
                        elif r == 1:
                            im += t
                        elif r == 2:
                            re -= t
                        else:
                            im -= t
                    row.append(acb(re, im).exp())
                values.append(row)
        worst = min(min(z.rel_accuracy_bits() for z in row) for row in values)
        if worst >= want or prec >= MAX_PREC:
            break
        prec = min(MAX_PREC, int(prec + want - worst + 64) // 64 * 64)
    quad = [[upper(acb(z.real.rad(), z.imag.rad())) for z in row] for row in values]
    resolved = [all(values[r][k].rel_accuracy_bits() >= want for r in range(len(models)))
                for k in range(len(mus))]
    return Transform(values=values, quad_err=quad, log_z0=[0.0] * len(models),
                            resolved=resolved, prec=prec, nodes=0,
                            method="cumulant-series", mus=mus)
