"""Per phase means per phase: a phase of a two-phase study gives exactly the numbers of
that phase audited alone (an exact identity), for the lens environment, the per-rater
lens, the fill value of a mean-filled cue, the policies and the cue correlations."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibrate.analyses import audit
from calibrate.data.ingest import UNNAMED_PHASE

CUES = 'x1 = "numeric"\nx2 = { type = "numeric", missing = "indicator" }\nkind = "categorical"'


def _phase_rows(rng, prefix: str, *, x1_mean: float, x2_mean: float, weights, crit_weights, n_cases=40, n_raters=4):
    """Cases and judgments of one phase: its own cases, its own cue means and outcome rule."""
    x1 = rng.normal(x1_mean, 1.0, n_cases).round(2)
    x2 = rng.normal(x2_mean, 1.0, n_cases).round(2)
    kind = rng.choice(["p", "p", "q", "r"], n_cases)
    crit = (crit_weights[0] * x1 + crit_weights[1] * x2 + 0.5 * (kind == "q")
            + rng.normal(0, 1, n_cases)).round(3)
    cases = pd.DataFrame({"case": [f"{prefix}{i}" for i in range(n_cases)], "x1": x1,
                          "x2": np.where(rng.random(n_cases) < 0.15, np.nan, x2), "kind": kind,
                          "outcome": crit})
    rows = []
    for r in range(n_raters):
        noise = rng.normal(0, 0.8, n_cases)
        score = np.clip(np.round(4 + weights[0] * (x1 - x1_mean) + weights[1] * (x2 - x2_mean) + noise), 1, 7)
        rows += [{"rater": f"rater{r + 1}", "case": c, "score": int(s)} for c, s in zip(cases["case"], score)]
    return cases, pd.DataFrame(rows)


def _spec(files: list[tuple[str, str | None]]) -> str:
    if any(ph for _, ph in files):
        data = "[" + ", ".join(f'{{ path = "{f}", phase = "{ph}" }}' for f, ph in files) + "]"
        phases = "[phases]\norder = [" + ", ".join(f'"{ph}"' for _, ph in files) + "]\n"
    else:
        data, phases = f'"{files[0][0]}"', ""
    return (f'[study]\nname = "two phases"\ndata = {data}\ncases = "cases.csv"\nseed = 7\n\n'
            '[columns]\nrater = "rater"\ncase = "case"\njudgment = "score"\ncriterion = "outcome"\n\n'
            f'[judgment]\nscale = "ordinal"\nmin = 1\nmax = 7\n\n[cues]\n{CUES}\n\n{phases}')


@pytest.fixture(scope="module")
def audits(tmp_path_factory):
    rng = np.random.default_rng(12)
    cases_a, judged_a = _phase_rows(rng, "a", x1_mean=0.0, x2_mean=0.0, weights=(0.8, 0.3), crit_weights=(1.0, 0.0))
    cases_b, judged_b = _phase_rows(rng, "b", x1_mean=3.0, x2_mean=1.0, weights=(0.2, 0.9), crit_weights=(-0.5, 1.5))
    folder = tmp_path_factory.mktemp("phases")
    pd.concat([cases_a, cases_b]).to_csv(folder / "cases.csv", index=False)
    judged_a.to_csv(folder / "before.csv", index=False)
    judged_b.to_csv(folder / "after.csv", index=False)
    (folder / "both.toml").write_text(_spec([("before.csv", "before"), ("after.csv", "after")]))
    (folder / "before.toml").write_text(_spec([("before.csv", None)]))
    (folder / "after.toml").write_text(_spec([("after.csv", None)]))
    return {name: audit(folder / f"{name}.toml", n_boot=50) for name in ("both", "before", "after")}


@pytest.mark.parametrize("phase", ["before", "after"])
def test_each_phase_equals_that_phase_audited_alone(audits, phase):
    both, alone = audits["both"], audits[phase]
    paired = both.to_dict()
    single = alone.to_dict()
    # Environment model of the lens: fitted on the phase's own cases.
    env_both = next(p for p in paired["panels"] if p["phase"] == phase)["lens_environment"]
    env_alone = single["panels"][0]["lens_environment"]
    assert env_both["n"] == env_alone["n"] == 40  # every case of the phase has an outcome
    for key in ("r_e", "intercept"):
        assert env_both[key] == pytest.approx(env_alone[key], abs=1e-12)
    assert env_both["weights"] == pytest.approx(env_alone["weights"], abs=1e-12)
    # Per rater: lens point estimates and the policy weights.
    for entry in (e for e in paired["raters"] if e["phase"] == phase):
        other = alone.rater_entry(entry["rater"], UNNAMED_PHASE)
        for key in ("r_a", "g", "c", "r_e", "r_s", "model_validity", "model_validity_cv"):
            assert entry["lens"][key] == pytest.approx(other["lens"][key], abs=1e-12)
        assert entry["policy"]["weights"] == pytest.approx(other["policy"]["weights"], abs=1e-12)
    # Fill value of the mean-filled cue, as policies.json records it for scoring.
    fill = {name: _fill(audits[name].policies["phases"][label]) for name, label in
            (("both", phase), (phase, UNNAMED_PHASE))}
    assert fill["both"] == pytest.approx(fill[phase], abs=1e-12)
    # Cue correlations of the phase.
    ph_both = next(p for p in paired["data_summary"]["phases"] if p["phase"] == phase)
    ph_alone = single["data_summary"]["phases"][0]
    assert ph_both["cue_correlations"] == ph_alone["cue_correlations"]


def _fill(policies: dict) -> float:
    return next(c for c in policies["design"]["cues"] if c["name"] == "x2")["fill_value"]


def test_the_phases_really_differ(audits):
    # The identity above means something only if pooling would have changed the numbers.
    both = audits["both"]
    envs = [p["lens_environment"]["weights"]["x1"] for p in both.to_dict()["panels"]]
    fills = [_fill(both.policies["phases"][ph]) for ph in ("before", "after")]
    assert abs(fills[0] - fills[1]) > 0.05
    assert envs[0] > 0.5 and envs[1] < -0.1  # the outcome rule differs between the phases
    pooled = both.summary.cue_correlations["x1"]["x2"]
    per_phase = [p.cue_correlations["x1"]["x2"] for p in both.summary.phases]
    assert all(pooled != pytest.approx(r, abs=1e-6) for r in per_phase)
    assert "cue_correlations" in both.summary.pooled_over_phases
