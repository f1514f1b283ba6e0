"""Shared test settings."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")
