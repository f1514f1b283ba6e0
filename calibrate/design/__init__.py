"""Before and after the season: planning the rating exercise, collecting the packets,
scoring new files with a captured policy."""

from .collect import CollectedPackets, collect_packets, write_collected
from .packets import write_plan
from .plan import RatingPlan, plan_exercise
from .score import PANEL, ScoredFiles, load_policies, score_files

__all__: list[str] = ["PANEL", "CollectedPackets", "RatingPlan", "ScoredFiles", "collect_packets", "load_policies",
                      "plan_exercise", "score_files", "write_collected", "write_plan"]
