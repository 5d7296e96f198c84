"""Figures and tables for papers: corner plot, fit with residuals, summary tables."""

from .figures import corner_figure, fit_figure
from .tables import write_summary

__all__ = ["corner_figure", "fit_figure", "write_summary"]
