"""The invented demo study: an admissions panel with known, planted truths.

Everything here is made up: the programme (the Fenwick Valley School of Applied
Cartography, MSc in Landscape Mapping), the reviewers (tree and plant names),
the applicants and their outcomes. The generator is seeded, so every install
writes byte-identical files.

Planted truths (a correct audit finds each of them every time):

* three policy groups: ``records`` (grades and test score), ``voice`` (essay and
  interview) and ``field`` (field experience and recommendation);
* ``Sorrel`` is inconsistent (large random error) in both phases;
* ``Juniper`` leans on ``alumni_family``, an attribute that must not count;
* ``Wren`` drifts: judgments rise by about 1.5 points over the second half of
  each session;
* a training between the autumn (``before``) and spring (``after``) rounds for
  seven reviewers makes them more consistent and moves their weights 60% of the
  way toward the rubric; the seven controls stay as they were.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..safe_files import atomic_write_text

DEMO_SEED = 33
CUES = ("grades", "test_score", "essay", "interview", "field_years", "recommendation")
RUBRIC = {"grades": 0.30, "test_score": 0.15, "essay": 0.20, "interview": 0.20,
          "field_years": 0.10, "recommendation": 0.05}

# Standardized weights (points on the 1-7 scale per cue SD) of each planted group.
# 'recommendation' is the effect of a 'strong' letter against 'solid' (and minus that for 'mixed').
GROUP_WEIGHTS = {
    "records": {"grades": 0.95, "test_score": 0.60, "essay": 0.15, "interview": 0.10,
                "field_years": 0.05, "recommendation": 0.10},
    "voice": {"grades": 0.20, "test_score": 0.05, "essay": 0.90, "interview": 0.80,
              "field_years": 0.10, "recommendation": 0.15},
    "field": {"grades": 0.20, "test_score": 0.10, "essay": 0.15, "interview": 0.20,
              "field_years": 0.90, "recommendation": 0.70},
}
RUBRIC_WEIGHTS = {c: 2.6 * w for c, w in RUBRIC.items()}  # about as strong a signal as a group's

REVIEWERS = {
    # name: (group, trained, leniency offset)
    "Alder": ("records", True, 0.2),
    "Birch": ("records", False, -0.3),
    "Cedar": ("records", True, 0.0),
    "Hazel": ("records", False, 0.3),
    "Juniper": ("records", False, 0.1),
    "Linden": ("voice", True, -0.2),
    "Maple": ("voice", False, 0.4),
    "Rowan": ("voice", True, 0.0),
    "Sorrel": ("voice", False, -0.1),
    "Tamarack": ("voice", True, 0.1),
    "Willow": ("field", True, -0.4),
    "Wren": ("field", False, 0.0),
    "Yarrow": ("field", True, 0.2),
    "Zinnia": ("field", False, -0.1),
}
NOISE_SD = 0.45
INCONSISTENT = "Sorrel"
INCONSISTENT_NOISE_SD = 1.6
LEANS_ON_EXCLUDED = "Juniper"
EXCLUDED_EFFECT = 1.2
DRIFTER = "Wren"
DRIFT_POINTS = 1.5
TRAINED_NOISE_SD = 0.25
TRAINING_PULL = 0.6
FILES_PER_ROUND = 350
READERS_PER_FILE = 4
REPEAT_SHARE = 0.15


@dataclass(frozen=True)
class DemoFiles:
    folder: Path
    spec: Path
    judgments: tuple[Path, ...]
    cases: Path
    readme: Path


def _applicants(rng: np.random.Generator, round_name: str, start: int, n: int) -> pd.DataFrame:
    z = rng.multivariate_normal(
        np.zeros(5),
        # grades and test score go together, as they do in real admissions data
        np.array([[1.0, 0.5, 0.2, 0.1, 0.0],
                  [0.5, 1.0, 0.1, 0.0, 0.0],
                  [0.2, 0.1, 1.0, 0.3, 0.0],
                  [0.1, 0.0, 0.3, 1.0, 0.1],
                  [0.0, 0.0, 0.0, 0.1, 1.0]]),
        size=n,
    )
    rec = rng.choice(["strong", "solid", "mixed"], size=n, p=[0.3, 0.5, 0.2])
    alumni = rng.random(n) < 0.2
    df = pd.DataFrame({
        "applicant": [f"A{start + i:04d}" for i in range(n)],
        "round": round_name,
        "grades": np.round(75 + 8 * z[:, 0], 1),
        "test_score": np.round(150 + 9 * z[:, 1]).astype(float),
        "essay": np.clip(np.round(3.5 + 1.1 * z[:, 2]), 1, 6),
        "interview": np.clip(np.round(6 + 1.8 * z[:, 3]), 1, 10),
        "field_years": np.round(np.clip(2.5 + 1.5 * z[:, 4], 0, 9), 1),
        "recommendation": rec,
        "alumni_family": np.where(alumni, "yes", "no"),
    })
    # test-optional: about a quarter of applicants send no test score
    df.loc[rng.random(n) < 0.25, "test_score"] = np.nan
    return df


def _standardized(cases: pd.DataFrame) -> pd.DataFrame:
    out = pd.DataFrame(index=cases.index)
    for c in ("grades", "test_score", "essay", "interview", "field_years"):
        x = cases[c].astype(float)
        out[c] = ((x - x.mean()) / x.std()).fillna(0.0)  # an absent score counts as average
    out["recommendation"] = cases["recommendation"].map({"strong": 1.0, "solid": 0.0, "mixed": -1.0})
    return out


def _weights_for(name: str, phase: str) -> dict[str, float]:
    group, trained, _ = REVIEWERS[name]
    w = dict(GROUP_WEIGHTS[group])
    if phase == "after" and trained:
        w = {c: (1 - TRAINING_PULL) * w[c] + TRAINING_PULL * RUBRIC_WEIGHTS[c] for c in w}
    return w


def _noise_for(name: str, phase: str) -> float:
    _, trained, _ = REVIEWERS[name]
    if name == INCONSISTENT:
        return INCONSISTENT_NOISE_SD
    return TRAINED_NOISE_SD if (phase == "after" and trained) else NOISE_SD


def build_demo(seed: int = DEMO_SEED) -> tuple[pd.DataFrame, dict[str, pd.DataFrame]]:
    """Return (cases table, {phase: judgments table}) of the demo study."""
    rng = np.random.default_rng(seed)
    names = list(REVIEWERS)
    case_tables = []
    judgments: dict[str, pd.DataFrame] = {}
    for k, (phase, round_name) in enumerate((("before", "autumn"), ("after", "spring"))):
        cases = _applicants(rng, round_name, start=1 + k * 1000, n=FILES_PER_ROUND)
        z = _standardized(cases)
        alumni = (cases["alumni_family"] == "yes").to_numpy(dtype=float)
        # route each file to READERS_PER_FILE reviewers, balancing the load
        load = np.zeros(len(names))
        assignment: dict[str, list[int]] = {n: [] for n in names}
        for i in range(len(cases)):
            jitter = rng.random(len(names)) * 0.5
            chosen = np.argsort(load + jitter)[:READERS_PER_FILE]
            for j in chosen:
                assignment[names[j]].append(i)
                load[j] += 1
        rows = []
        for name in names:
            _, _, leniency = REVIEWERS[name]
            w = _weights_for(name, phase)
            files = np.array(assignment[name])
            rng.shuffle(files)
            n_rep = int(round(REPEAT_SHARE * len(files)))
            # hidden repeats come back at least 20 files later
            repeat_files = rng.choice(files[: len(files) - 20], size=n_rep, replace=False)
            order = list(files)
            for f in repeat_files:
                first_pos = order.index(f)
                pos = int(rng.integers(first_pos + 20, len(order) + 1))
                order.insert(pos, f)
            total = len(order)
            signal = z[list(CUES)].to_numpy() @ np.array([w[c] for c in CUES])
            noise = rng.normal(0.0, _noise_for(name, phase), size=total)
            for pos, i in enumerate(order):
                value = 4.0 + leniency + signal[i] + noise[pos]
                if name == LEANS_ON_EXCLUDED:
                    value += EXCLUDED_EFFECT * (alumni[i] - 0.2)
                if name == DRIFTER:
                    late = max(0.0, pos / (total - 1) - 0.5) * 2.0  # 0 until halfway, then to 1
                    value += DRIFT_POINTS * late
                rows.append({
                    "reviewer": name,
                    "applicant": cases["applicant"].iat[i],
                    "score": int(np.clip(np.round(value), 1, 7)),
                    "read_order": pos + 1,
                })
        judgments[phase] = pd.DataFrame(rows)
        cases = cases.copy()
        case_tables.append(cases)
    all_cases = pd.concat(case_tables, ignore_index=True)
    # first-year result: known only for admitted applicants (mean score in the top 40%)
    z_all = _standardized(all_cases)
    quality = (0.45 * z_all["grades"] + 0.2 * z_all["test_score"] + 0.25 * z_all["essay"]
               + 0.25 * z_all["interview"] + 0.15 * z_all["field_years"]
               + 0.1 * z_all["recommendation"])
    outcome = np.round(60 + 8 * quality + rng.normal(0, 5, len(all_cases)), 1)
    means = pd.concat(judgments.values()).groupby("applicant")["score"].mean()
    cut = means.quantile(0.6)
    admitted = all_cases["applicant"].map(means) >= cut
    all_cases["first_year_result"] = np.where(admitted, outcome, np.nan)
    return all_cases, judgments


SPEC_TEXT = """\
# Demo study: an invented admissions panel (all names and data are made up).
[study]
name = "Fenwick Valley MSc Landscape Mapping admissions 2026-27"
data = [
  { path = "judgments_autumn.csv", phase = "before" },
  { path = "judgments_spring.csv", phase = "after" },
]
cases = "applicants.csv"
seed = 20261201
# first-year results exist only for admitted applicants
criterion_only_for_selected = true

[columns]
rater = "reviewer"
case = "applicant"
judgment = "score"
sequence = "read_order"
criterion = "first_year_result"

[judgment]
scale = "ordinal"
min = 1
max = 7
cut_off = 5

[cues]
grades = "numeric"
test_score = { type = "numeric", missing = "indicator" }
essay = "numeric"
interview = "numeric"
field_years = "numeric"
recommendation = "categorical"

[rubric]
basis = "standardized"
grades = 0.30
test_score = 0.15
essay = 0.20
interview = 0.20
field_years = 0.10
recommendation = 0.05

[excluded]
columns = ["alumni_family"]

[phases]
order = ["before", "after"]
trained = [TRAINED]
"""


def _readme_text() -> str:
    trained = [n for n, (_, t, _) in REVIEWERS.items() if t]
    controls = [n for n, (_, t, _) in REVIEWERS.items() if not t]
    groups = {g: [n for n, (gg, _, _) in REVIEWERS.items() if gg == g] for g in GROUP_WEIGHTS}
    lines = [
        "# Demo study (invented)",
        "",
        "Everything in this folder is invented: the Fenwick Valley School of Applied Cartography,",
        "its MSc in Landscape Mapping, the fourteen reviewers (named after plants), the applicants",
        "and their first-year results. `calibrate demo` writes it; `make demo` audits it.",
        "",
        "## Files",
        "",
        "- `study.toml`: the study spec.",
        "- `applicants.csv`: one row per applicant: cues (grades, test_score, essay, interview,",
        "  field_years, recommendation), the excluded attribute `alumni_family`, and the criterion",
        "  `first_year_result` (known only for admitted applicants, the top 40% by mean score).",
        "- `judgments_autumn.csv` (phase `before`) and `judgments_spring.csv` (phase `after`):",
        "  reviewer, applicant, score (1-7) and read_order.",
        "",
        "## Design",
        "",
        f"{FILES_PER_ROUND} new applicants per round, each read by {READERS_PER_FILE} of the 14 "
        f"reviewers (about {FILES_PER_ROUND * READERS_PER_FILE // 14} files each), plus about "
        f"{int(REPEAT_SHARE * 100)}% hidden repeats",
        "that come back at least 20 files later. About a quarter of applicants sent no test score",
        "(test-optional; the spec uses the `indicator` rule).",
        "",
        "## Planted truths",
        "",
        "- Three policy groups: "
        + "; ".join(f"`{g}` ({', '.join(m)})" for g, m in groups.items()) + ".",
        "  `records` weighs grades and test score; `voice` essay and interview; `field` field",
        "  years and the recommendation.",
        f"- `{INCONSISTENT}` is inconsistent: random error SD {INCONSISTENT_NOISE_SD} points against "
        f"{NOISE_SD} for the others, in both rounds.",
        f"- `{LEANS_ON_EXCLUDED}` gives applicants with `alumni_family = yes` {EXCLUDED_EFFECT} points "
        "more, which the rules forbid.",
        f"- `{DRIFTER}` drifts: scores rise steadily over the second half of each session, by "
        f"{DRIFT_POINTS} points at the end.",
        f"- Training between the rounds for {', '.join(trained)}: in spring their random error falls "
        f"to SD {TRAINED_NOISE_SD} and their weights move {int(TRAINING_PULL * 100)}% of the way to the "
        f"rubric. Controls ({', '.join(controls)}) stay as they were.",
        "- No reviewer uses a cut-off rule; leniency offsets are small (-0.4 to +0.4 points).",
        "",
        "The planted groups hold in the `before` round; in `after`, trained reviewers have moved",
        "toward the rubric, so the grouping there is expected to change.",
        "",
        "## About chance findings",
        "",
        f"The data is one seeded draw (seed {DEMO_SEED}). Some checks flag a reviewer who follows a",
        "straight-line policy at a known chance rate: the cut-off rule check at 5% per reviewer and",
        "phase, for example, so a panel of 14 reviewers in two phases shows about one such flag on",
        "average. This draw was picked so that no chance flag muddies the planted truths above;",
        "other seeds (`calibrate.data.demo.write_demo(folder, seed=...)`) show chance flags at the stated",
        "rates, which is what real panels look like too. Rounding scores to the 1-7 scale and",
        "capping them at its ends also bends the policies slightly, which curvature checks can see.",
        "",
    ]
    return "\n".join(lines)


def write_demo(folder: str | Path, *, seed: int = DEMO_SEED) -> DemoFiles:
    """Write the demo study (tables, spec, README) into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    cases, judgments = build_demo(seed)
    cases_path = folder / "applicants.csv"
    atomic_write_text(cases_path, cases.to_csv(index=False, lineterminator="\n"))
    paths = []
    for phase, fname in (("before", "judgments_autumn.csv"), ("after", "judgments_spring.csv")):
        p = folder / fname
        atomic_write_text(p, judgments[phase].to_csv(index=False, lineterminator="\n"))
        paths.append(p)
    trained = ", ".join(f'"{n}"' for n, (_, t, _) in REVIEWERS.items() if t)
    spec_path = folder / "study.toml"
    atomic_write_text(spec_path, SPEC_TEXT.replace("TRAINED", trained))
    readme = folder / "README.md"
    atomic_write_text(readme, _readme_text())
    return DemoFiles(folder=folder, spec=spec_path, judgments=tuple(paths), cases=cases_path,
                     readme=readme)
