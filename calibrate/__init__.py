"""calibrate: audit and calibrate human raters (judgment analysis, policy capturing)."""

__version__ = "0.1.0"
