"""The door: the study spec, reading and validating the tables, the cue design, the data
summary and the invented demo study. Nothing here computes a statistic."""

from .cues import CueDesign, CueRule, build_cue_design
from .demo import build_demo, write_demo
from .ingest import JudgmentTable, PhaseData, inspect_study, load_study, read_table
from .rows import JudgmentRows, RaterLookup, line_up
from .drafting import draft_spec
from .spec import DataSource, JudgmentScale, StudySpec, parse_spec, read_spec, write_spec
from .summary import DataSummary, PhaseSummary, format_summary, summarize

__all__ = [
    "CueDesign",
    "CueRule",
    "DataSource",
    "DataSummary",
    "JudgmentRows",
    "JudgmentScale",
    "JudgmentTable",
    "PhaseData",
    "PhaseSummary",
    "RaterLookup",
    "StudySpec",
    "build_cue_design",
    "build_demo",
    "draft_spec",
    "format_summary",
    "inspect_study",
    "line_up",
    "load_study",
    "parse_spec",
    "read_spec",
    "read_table",
    "summarize",
    "write_demo",
    "write_spec",
]
