"""PDF reports people read: a private feedback report per rater and the chair's
panel summary. Reports read the audit's result (results.json and its tables) only."""

from .builder import build_reports, load_report_input, panel_pdf, rater_file_names, rater_pdf

__all__ = ["build_reports", "load_report_input", "panel_pdf", "rater_file_names", "rater_pdf"]
