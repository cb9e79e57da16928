"""The HTML qualification report (`benchlog report`): verdict, distributions, trends, Weibull plot,
runs and incidents, the spec used; one self-contained file."""

from benchlog.views.report._data import LotData, load_lot, resolve_lot, spec_for
from benchlog.views.report._html import render_report

__all__ = ["LotData", "load_lot", "resolve_lot", "spec_for", "render_report"]
