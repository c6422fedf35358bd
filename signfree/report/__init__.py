"""What an analysis hands to a reader: the files of a run, figures and the
self-contained HTML report.

  outputs   results.csv and summary.json of one analysis, the printed summary
  style     the shared look (one journal column, Okabe-Ito colours) and number helpers
  figures   fit, phase and depth figures; PNG/PDF files
  routes    the compare and zeros figures
  page      the HTML page and the files of ``signfree report``

Only ``outputs`` is free of matplotlib; the package imports nothing by itself, so
``signfree run`` does not pay for matplotlib.
"""
