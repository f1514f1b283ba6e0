"""Before and after the season: planning the rating exercise, collecting the packets,
scoring new files with a captured policy."""

from .score import PANEL, ScoredFiles, load_policies, score_files

__all__: list[str] = ["PANEL", "ScoredFiles", "load_policies", "score_files"]
