"""From a density to results with their error budget.

  settings     Settings (what an analysis is asked to do), the mu list
  analyse      the whole path as one call
  uncertainty  statistical errors through fit and integral
  results      rows with their error budget, statuses, the table
  cumulant     the cumulant route and its radius of convergence
  zeros        zeros of Z(mu) in a complex box (contour: the argument principle)
  compare      every route side by side
"""
