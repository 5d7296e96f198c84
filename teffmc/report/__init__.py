"""Everything a run hands over for a paper, through one output path (output.py).

Figures (figures.py, figures_more.py, style.py), paper tables (latex.py, tables.py), the
methods paragraph and its references (methods.py, bibliography.py, templates/), the HTML
pages (html.py, survey.py).
"""

from .figures import corner_figure, fit_figure
from .tables import write_summary

__all__ = ["corner_figure", "fit_figure", "write_summary"]
