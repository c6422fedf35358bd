"""Figures and the self-contained HTML report of an analysis.

  style     the shared look (one journal column, Okabe-Ito colours) and number helpers
  figures   fit, phase and depth figures; PNG/PDF files
  routes    the compare and zeros figures
  page      the HTML page and the files of ``signfree report``

matplotlib is imported only when this package is.
"""
from signfree.report.figures import figures_files, make_figures, write_figures
from signfree.report.page import html_report, report_files

__all__ = ["figures_files", "html_report", "make_figures", "report_files", "write_figures"]
