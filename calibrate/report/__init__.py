"""PDF reports people read: a private feedback report per rater and the chair's
panel summary. Reports read the audit's result (results.json and its tables) only.

The PDF code (reportlab, matplotlib) loads on first use of a name below, so that
``calibrate.report.names`` (file names, used without PDFs too) stays light.
"""

__all__ = ["build_reports", "load_report_input", "panel_pdf", "rater_file_names", "rater_pdf"]


def __getattr__(name: str):
    if name in __all__:
        from . import builder

        return getattr(builder, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
