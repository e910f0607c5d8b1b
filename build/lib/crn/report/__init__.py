"""One self-contained HTML report of every analysis of a model (``crn report``)."""

from crn.report.collect import SAVED_NAMES, ReportData, ReportSettings, collect_report
from crn.report.render import CAUTION, SECTIONS, render_report

__all__ = ["ReportSettings", "ReportData", "collect_report", "render_report", "SECTIONS",
           "CAUTION", "SAVED_NAMES"]
