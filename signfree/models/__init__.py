"""Smoothing models of the measured density: small immutable values that the
engine integrates and the analysis compares without asking which one it holds.

The shared interface:
  domain          (q_min, q_max) of the data (None for a series model)
  parity          'even', 'odd' or 'none'
  degree, label   e.g. 12 and 'chebyshev:12' (degree None where it means nothing)
  integrand       the form the engine integrates: 'chebyshev-exponent' (an
                  entire ln rho), 'piecewise-linear', 'cumulant-series'
  log_density(q), derivative(q)   ln rho and d ln rho/dq in double precision
  chi2, dof       the fit that made the model (nan and 0 when there was none)

  chebyshev   Chebyshev series of ln rho, fitted with the degree chosen by chi^2
  piecewise   the raw piecewise-linear reconstruction
  cumulant    the truncated cumulant expansion and the cumulants of data
"""
