"""Hand-made comparison.json dictionaries holding every key of the agreed contract.

``full_comparison`` builds one (with the words ``compare`` adds: verdicts.annotate) with a chosen number of phases, with or without a control
group, and a planted training effect (positive, negative or none) whose intervals are
drawn around it; the report and verdict tests render and read these. The numbers are
invented: they only need the shapes and the interval logic of a real comparison.
"""

from __future__ import annotations

import numpy as np

from calibrate.training.verdicts import annotate

CUES = ("grades", "essay", "interview", "field_years")
RUBRIC = {"grades": 0.4, "essay": 0.3, "interview": 0.2, "field_years": 0.1}
METRICS = ("r", "retest_r", "misallocation", "g_rubric", "severity", "r_a", "g")
_BASE = {"r": 0.80, "retest_r": 0.75, "misallocation": 0.30, "g_rubric": 0.75, "severity": 0.0,
         "r_a": 0.35, "g": 0.70}
_BETTER = {"r": 1, "retest_r": 1, "misallocation": -1, "g_rubric": 1, "r_a": 1, "g": 1, "severity": 0}


def _pairs(n: int) -> list[tuple[int, int]]:
    out = [(i, i + 1) for i in range(n - 1)]
    if n > 2:
        out.append((0, n - 1))
    return out


def _change(rng, phases, a, b, values, *, half_width, comparable=True):
    delta = values[phases[b]] - values[phases[a]]
    centre = delta + rng.normal(0, half_width / 3)
    w = half_width * rng.uniform(0.6, 1.4)
    return {"from": phases[a], "to": phases[b], "delta": float(delta), "ci_low": float(centre - w),
            "ci_high": float(centre + w), "p_value": float(rng.uniform(0, 1)), "method": "invented",
            "detectable": float(2.8 * w / 1.96), "comparable": comparable,
            "note": None if comparable else "different cases in each phase"}


def _series(rng, phases, values, *, half_width, comparable=True):
    return {"values": {ph: float(v) for ph, v in values.items()},
            "changes": [_change(rng, phases, a, b, values, half_width=half_width, comparable=comparable)
                        for a, b in _pairs(len(phases))]}


def full_comparison(seed: int = 0, *, n_phases: int = 2, has_control: bool = True, effect: float = 0.1,
                    n_trained: int = 6, n_control: int = 6, fade: float = 0.0,
                    trained_start_worse: bool = False, same_cases: bool = False) -> dict:
    """A comparison.json dictionary with every contract key.

    ``effect``: the planted gain of the trained raters, in the good direction of each metric
    (negative: they got worse); ``fade``: the share of the gain lost at the last phase (3+ phases).
    """
    rng = np.random.default_rng(seed)
    phases = ["before", "after", "followup", "later"][:n_phases]
    if not has_control:
        n_control = 0
    raters = []
    for i in range(n_trained + n_control):
        trained = i < n_trained
        metrics = {}
        for m in METRICS:
            start = _BASE[m] + rng.normal(0, 0.04) - (0.08 * _BETTER[m] if trained and trained_start_worse else 0)
            gain = (effect if trained else 0.0) * (_BETTER[m] or 1) + rng.normal(0, 0.03)
            values = {phases[0]: start}
            for k in range(1, n_phases):
                kept = 1.0 - (fade if k == n_phases - 1 and k >= 2 else 0.0)
                values[phases[k]] = start + gain * kept + rng.normal(0, 0.01)
            metrics[m] = _series(rng, phases, values, half_width=0.08, comparable=m not in ("r", "misallocation"))
        shares = {}
        for c in CUES:
            start = RUBRIC[c] + rng.normal(0, 0.08)
            values = {ph: start + (RUBRIC[c] - start) * (0.5 if trained and k else 0.0) for k, ph in enumerate(phases)}
            shares[c] = _series(rng, phases, values, half_width=0.06, comparable=False)
        raters.append({"rater": f"P{i + 1:02d}", "trained": trained, "metrics": metrics, "shares": shares,
                       "verdicts": {}})
    arms = {"trained": [r for r in raters if r["trained"]]}
    if has_control:
        arms["control"] = [r for r in raters if not r["trained"]]
    panel_metrics = {}
    for m in METRICS:
        panel_metrics[m] = {}
        for arm, members in arms.items():
            vals = {ph: float(np.mean([r["metrics"][m]["values"][ph] for r in members])) for ph in phases}
            panel_metrics[m][arm] = _series(rng, phases, vals, half_width=0.04)

    def effect_block(a, b):
        out = {}
        for m in METRICS:
            d_t = panel_metrics[m]["trained"]["values"][phases[b]] - panel_metrics[m]["trained"]["values"][phases[a]]
            d_c = (panel_metrics[m]["control"]["values"][phases[b]]
                   - panel_metrics[m]["control"]["values"][phases[a]])
            est = d_t - d_c
            w = rng.uniform(0.03, 0.09)
            centre = est + rng.normal(0, w / 3)
            base = (panel_metrics[m]["trained"]["values"][phases[0]]
                    - panel_metrics[m]["control"]["values"][phases[0]])
            out[m] = {"from": phases[a], "to": phases[b], "estimate": float(est), "ci_low": float(centre - w),
                      "ci_high": float(centre + w), "p_value": float(rng.uniform(0, 1)),
                      "method": "Welch t on the per-rater changes", "baseline_difference": float(base),
                      "baseline_p": 0.05 if trained_start_worse else 0.6,
                      "arms_differ_at_baseline": bool(trained_start_worse),
                      "ancova": {"estimate": float(est), "ci_low": float(centre - w * rng.uniform(0.8, 1.3)),
                                 "ci_high": float(centre + w * rng.uniform(0.8, 1.3))}}
        return out

    def per_arm(start):
        def series(step):
            return _series(rng, phases, {ph: start - step * k for k, ph in enumerate(phases)}, half_width=0.04)
        if has_control:
            return {"trained": series(0.1 * effect / 0.1 if effect else 0.0), "control": series(0.01)}
        return {"all": series(0.05)}

    panel = {
        "metrics": panel_metrics,
        "training_effect": effect_block(0, n_phases - 1) if has_control else None,
        "agreement": {"icc": _series(rng, phases, {ph: 0.6 + 0.03 * k for k, ph in enumerate(phases)},
                                     half_width=0.05, comparable=same_cases),
                      "alpha": _series(rng, phases, {ph: 0.55 + 0.03 * k for k, ph in enumerate(phases)},
                                       half_width=0.05, comparable=same_cases),
                      "same_cases": same_cases},
        "convergence": {"pairwise_distance": per_arm(0.9), "distance_to_rubric": per_arm(0.6)},
        "groups": {"values": {ph: max(1, 3 - k) for k, ph in enumerate(phases)},
                   "merged": [{"from": phases[a], "to": phases[b], "merged": True, "adjusted_rand": 0.4}
                              for a, b in _pairs(n_phases)]},
        "cue_shift": {c: {"rubric_share": RUBRIC[c],
                          "trained": {"values": {ph: float(np.mean([r["shares"][c]["values"][ph]
                                                                    for r in arms["trained"]])) for ph in phases}},
                          "control": ({"values": {ph: float(np.mean([r["shares"][c]["values"][ph]
                                                                     for r in arms["control"]])) for ph in phases}}
                                      if has_control else None),
                          "toward_rubric": bool(rng.uniform() < 0.7)} for c in CUES},
        "detectable": {m: {"per_rater": 0.12, "panel": 0.07} for m in METRICS},
    }
    if n_phases >= 3 and has_control:
        panel["follow_up_effect"] = effect_block(n_phases - 2, n_phases - 1)
    elif n_phases >= 3:
        panel["follow_up_effect"] = None
    return annotate({"schema": "calibrate.comparison/1", "seed": seed, "n_boot": 100, "phases": phases,
            "has_control": has_control, "study": {"name": "Invented panel"},
            "summary": ["An invented summary line."], "raters": raters,
            "unmatched": [{"rater": "P99", "phases": [phases[0]]}], "panel": panel,
            "cautions": ["An invented caution from compare."]})
