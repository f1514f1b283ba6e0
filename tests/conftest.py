"""Shared test settings."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")

from hypothesis import settings  # noqa: E402

# Property tests draw the same examples on every run (CI included): a failure is then
# reproducible, and no run passes or fails by the luck of the draw.
settings.register_profile("calibrate", derandomize=True, print_blob=True)
settings.load_profile("calibrate")
