"""The words of a comparison: "did it work, for whom, and does it last", read from intervals.

Pure functions of plain numbers and comparison.json-shaped mappings (no report code), so
that comparison.json, results.json and every report say the same thing:

- a change is *better* or *worse* only when its 95% interval excludes zero in that
  direction (:func:`change_word`); an interval holding zero reads "no clear change",
  never "no change";
- the training *worked* on a metric only when the difference in differences (trained
  raters' mean change minus the controls') excludes zero in the good direction, and the
  ANCOVA estimate, where recorded, says the same; without a control group a change is
  never credited to the training;
- it *lasted* only when the gain is still clear from the first phase to the follow-up and
  the follow-up interval (end of training to follow-up) shows no clear slip back.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

from ..formatting import METRIC_LABELS, fmt, signed

# Which way is better for each metric; severity has none (it is relative to the panel), nor
# has a cue's share (closer to the rubric may be up or down).
BETTER = {"r": 1, "retest_r": 1, "r_a": 1, "g": 1, "g_rubric": 1, "misallocation": -1}
# The panel's figures: agreement up is better; the spread of weight profiles and the
# distance to the rubric down is better (the raters converge).
PANEL_BETTER = {"icc": 1, "alpha": 1, "pairwise_distance": -1, "distance_to_rubric": -1}
METRIC_WORDS = {"r": "consistency (R_s)", "retest_r": "test-retest agreement",
                "misallocation": "closeness to the rubric's weights", "g_rubric": "match with the rubric (G)",
                "severity": "severity offset", "r_a": "accuracy against the outcome (r_a)",
                "g": "match with the outcome's model (G)"}


def _finite(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)


def change_word(metric: str, ci_low: float | None, ci_high: float | None) -> str:
    """'better', 'worse' or 'no clear change' (the interval holds zero or is missing); for a
    metric without a better direction, 'higher' or 'lower'."""
    if not (_finite(ci_low) and _finite(ci_high)) or ci_low <= 0 <= ci_high:
        return "no clear change"
    up = ci_low > 0
    direction = BETTER.get(metric, PANEL_BETTER.get(metric))
    if direction is None:
        return "higher" if up else "lower"
    return "better" if up == (direction > 0) else "worse"


def listing(items: Sequence[str]) -> str:
    items = list(items)
    if not items:
        return ""
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def _directed(metrics: Sequence[str]) -> list[str]:
    return [m for m in metrics if m in BETTER]


def effect_word(metric: str, effect: Mapping) -> str:
    """The verdict of one training effect: 'better', 'worse', 'no clear change' or 'mixed'
    (the difference in differences and the ANCOVA estimate, where recorded, disagree)."""
    welch = change_word(metric, effect.get("ci_low"), effect.get("ci_high"))
    ancova = effect.get("ancova")
    if not ancova:
        return welch
    adjusted = change_word(metric, ancova.get("ci_low"), ancova.get("ci_high"))
    return welch if welch == adjusted else "mixed"


def worked_sentence(phases: Sequence[str], *, has_control: bool, metrics: Sequence[str],
                    effects: Mapping | None, trained_changes: Mapping) -> str:
    """Did it work? ``effects``: metric -> training effect (first to last phase);
    ``trained_changes``: metric -> the trained arm's mean change, first to last (used
    without a control group)."""
    first, last = phases[0], phases[-1]
    metrics = _directed(metrics)
    if has_control and effects:
        words = {m: effect_word(m, effects[m]) for m in metrics if m in effects}
        better = [METRIC_WORDS[m] for m, w in words.items() if w == "better"]
        worse = [METRIC_WORDS[m] for m, w in words.items() if w == "worse"]
        mixed = [METRIC_WORDS[m] for m, w in words.items() if w == "mixed"]
        if better:
            out = (f"Did it work? Yes, on {listing(better)}: from {first} to {last} the trained raters "
                   "improved more than the controls, and the interval of the difference excludes zero.")
        else:
            out = (f"Did it work? Not clearly: from {first} to {last} the trained raters did not improve "
                   "clearly more than the controls on any measure.")
        if worse:
            out += f" They fell behind the controls on {listing(worse)}."
        if mixed:
            out += (f" On {listing(mixed)} the evidence is mixed (the difference in changes and the "
                    "estimate that holds each rater's starting value constant disagree), so no gain is credited.")
        return out
    words = {m: change_word(m, trained_changes[m].get("ci_low"), trained_changes[m].get("ci_high"))
             for m in metrics if m in trained_changes}
    better = [METRIC_WORDS[m] for m, w in words.items() if w == "better"]
    if better:
        return (f"Did it work? Cannot be told: from {first} to {last} the raters improved on "
                f"{listing(better)}, but with no control group this cannot be credited to the training "
                "alone (practice, different cases and regression to the mean move figures too).")
    return (f"Did it work? No clear sign: from {first} to {last} the raters did not improve clearly on any "
            "measure, and with no control group nothing could be credited to the training anyway.")


def for_whom_sentence(phases: Sequence[str], *, has_control: bool, metrics: Sequence[str],
                      raters: Sequence[tuple[bool, Mapping]]) -> str:
    """For whom? ``raters``: (trained, {metric: change first to last}) per rater. Counts the
    raters whose own interval excludes zero in the good direction."""
    first, last = phases[0], phases[-1]
    parts = []
    n_t = sum(1 for t, _ in raters if t)
    n_c = len(raters) - n_t
    for m in _directed(metrics):
        def improved(arm: bool) -> int:
            return sum(1 for t, ch in raters if t == arm and m in ch
                       and change_word(m, ch[m].get("ci_low"), ch[m].get("ci_high")) == "better")
        if has_control:
            parts.append(f"{METRIC_WORDS[m]} {improved(True)} of {n_t} trained and {improved(False)} of "
                         f"{n_c} controls")
        else:
            parts.append(f"{METRIC_WORDS[m]} {improved(True)} of {n_t}")
    if not parts:
        return "For whom? No per-rater change with a better direction was measured."
    return (f"For whom? Raters whose own change from {first} to {last} is clearly for the better: "
            + "; ".join(parts) + ". The others' intervals hold zero or point the other way.")


def lasts_sentence(phases: Sequence[str], *, has_control: bool, metrics: Sequence[str],
                   follow_up: Mapping | None, overall: Mapping | None) -> str:
    """Does it last? ``follow_up``: metric -> the change from the second-to-last to the last
    phase (the difference in differences with a control group, else the trained arm's mean
    change); ``overall``: metric -> the gain first to last in the same form (a training
    effect with a control group, else the arm's change)."""
    if len(phases) < 3:
        return (f"Does it last? Cannot be told: the study ends with phase '{phases[-1]}' and has no later "
                "follow-up round; "
                "add a later round of the same kind to see whether the change holds.")
    end, later, first = phases[-2], phases[-1], phases[0]
    if not follow_up:
        return ("Does it last? Cannot be told: this comparison holds no follow-up figures.")
    held, faded = [], []
    for m in _directed(metrics):
        if m not in follow_up:
            continue
        slip = change_word(m, follow_up[m].get("ci_low"), follow_up[m].get("ci_high")) == "worse"
        if slip:
            faded.append(METRIC_WORDS[m])
            continue
        gain = overall.get(m) if overall else None
        word = (effect_word(m, gain) if has_control else
                change_word(m, gain.get("ci_low"), gain.get("ci_high"))) if gain else "no clear change"
        if word == "better":
            held.append(METRIC_WORDS[m])
    bits = []
    whose = "the trained raters' lead over the controls" if has_control else "the raters' gain"
    if held:
        bits.append(f"Does it last? On {listing(held)}, yes: {whose} is still clear from {first} to "
                    f"{later}, and the interval from {end} to {later} shows no clear slip back.")
    if faded:
        lead = "Does it last? " if not held else ""
        bits.append(f"{lead}On {listing(faded)} it slipped back from {end} to {later} (the interval "
                    "excludes zero).")
    if not bits:
        bits.append(f"Does it last? Cannot be said: from {end} to {later} nothing slipped back clearly, "
                    f"but no gain is clear from {first} to {later} either.")
    if held and not has_control:
        bits.append("Without a control group this cannot be credited to the training alone.")
    return " ".join(bits)


def regression_to_mean_sentence(*, has_control: bool, metrics: Sequence[str],
                                effects: Mapping | None) -> str | None:
    """The regression-to-the-mean caution when the trained raters started worse on average
    than the controls (on a metric where the arms differed at the first phase)."""
    if not has_control or not effects:
        return ("Without a control group, regression to the mean cannot be told apart from a gain: "
                "raters who start with low figures tend to score higher next time by chance alone.")
    worse_start = []
    for m in _directed(metrics):
        e = effects.get(m) or {}
        base = e.get("baseline_difference")
        if e.get("arms_differ_at_baseline") and _finite(base) and base * BETTER[m] < 0:
            worse_start.append(METRIC_WORDS[m])
    if not worse_start:
        return None
    return (f"The trained raters started worse on average than the controls on {listing(worse_start)}: "
            "part of their gain may be regression to the mean (figures far from the average tend to move "
            "back toward it by chance). The estimate that holds each rater's starting value constant "
            "(ANCOVA) is shown beside it.")


# ------------------------------------------------------------- the rater's own words

# Per metric: what a better, worse or unclear change means, said about the task.
_RATER_WORDS = {
    "r": ("your judgments followed your own rule more closely",
          "your judgments followed your own rule less closely",
          "no clear change in how closely your judgments followed your own rule"),
    "retest_r": ("your two judgments of the same case agreed more closely",
                 "your two judgments of the same case agreed less closely",
                 "no clear change in how closely your two judgments of the same case agreed"),
    "misallocation": ("the weight you gave each cue moved closer to the rubric's",
                      "the weight you gave each cue moved further from the rubric's",
                      "no clear change in how close your cue weights are to the rubric's"),
    "g_rubric": ("your judgments ranked files more like the rubric does",
                 "your judgments ranked files less like the rubric does",
                 "no clear change in how closely your ranking matches the rubric's"),
    "r_a": ("your judgments matched the later outcome more closely",
            "your judgments matched the later outcome less closely",
            "no clear change in how closely your judgments matched the later outcome"),
    "g": ("your rule ranked files more like the outcome's own model",
          "your rule ranked files less like the outcome's own model",
          "no clear change in how closely your rule matches the outcome's model"),
}


# R_s reads higher with fewer cases, so its change is the change in the adjusted R_s (Wherry),
# which need not equal the difference of the two printed values.
ADJUSTED_NOTE = " (of R_s adjusted for the number of cases)"


def rater_change_sentence(metric: str, change: Mapping) -> str:
    """One rater's change in words about the task, with the figures and the interval:
    "From before to after, your judgments followed your own rule more closely: R_s 0.71 ->
    0.83, change +0.12, 95% interval +0.04 to +0.20."  ``change`` holds from, to,
    value_from, value_to, delta, ci_low, ci_high (and optionally verdict, note)."""
    verdict = change.get("verdict") or change_word(metric, change.get("ci_low"), change.get("ci_high"))
    better, worse, unclear = _RATER_WORDS.get(metric, (None, None, None))
    words = {"better": better, "worse": worse}.get(verdict, unclear) or f"{METRIC_WORDS.get(metric, metric)} changed"
    label = METRIC_LABELS.get(metric, metric)

    out = (f"From {change.get('from')} to {change.get('to')}, {words}: {label} {fmt(change.get('value_from'))} "
           f"-> {fmt(change.get('value_to'))}, change{ADJUSTED_NOTE if metric == 'r' else ''} "
           f"{signed(change.get('delta'))}, 95% interval "
           f"{signed(change.get('ci_low'), end=True)} to {signed(change.get('ci_high'), end=True)}.")
    if change.get("note"):
        out += f" Note: {change['note']}."
    return out


def comparison_summary(phases: Sequence[str], panel: Mapping, has_control: bool) -> tuple[str, ...]:
    """The plain sentences `calibrate compare` prints and comparison.json keeps as ``summary``:
    did it work, and (with three phases or more) did it slip back. ``panel`` is
    comparison.json's ``panel`` (before or after :func:`annotate`)."""
    lines = []
    first, last = phases[0], phases[-1]
    metrics = _directed(panel["metrics"])
    if has_control:
        effects = panel["training_effect"]
        # A gain is credited only when the ANCOVA (each rater's starting value held
        # constant) agrees with the difference in changes; otherwise the evidence is mixed.
        words = {m: effect_word(m, effects[m]) for m in metrics}
        better = [METRIC_WORDS[m] for m in metrics if words[m] == "better"]
        worse = [METRIC_WORDS[m] for m in metrics if words[m] == "worse"]
        mixed = [METRIC_WORDS[m] for m in metrics if words[m] == "mixed"]
        if better:
            lines.append(f"From {first} to {last} the trained raters improved more than the controls "
                         f"on {listing(better)}.")
        else:
            lines.append(f"From {first} to {last} the trained raters did not improve clearly more than "
                         "the controls on any measure.")
        if worse:
            lines.append(f"They fell behind the controls on {listing(worse)}.")
        if mixed:
            lines.append(f"On {listing(mixed)} the evidence is mixed: the difference in changes and the "
                         "estimate that holds each rater's starting value constant disagree, so no gain "
                         "is credited.")
    else:
        overall = {m: _change_between(panel["metrics"][m]["trained"], first, last) or {} for m in metrics}
        words = {m: change_word(m, ch.get("ci_low"), ch.get("ci_high")) for m, ch in overall.items()}
        # A figure not corrected for different cases in the two phases is named apart: its
        # change may be the cases' (there is no control group to take that out).
        uncorrected = {m for m, ch in overall.items() if not ch.get("comparable", True)}
        better = [METRIC_WORDS[m] for m in metrics if words[m] == "better" and m not in uncorrected]
        unsure = [METRIC_WORDS[m] for m in metrics if words[m] == "better" and m in uncorrected]
        lines.append(f"From {first} to {last} the raters improved on {listing(better)}, but with no "
                     "control group this cannot be credited to the training alone."
                     if better else f"From {first} to {last} the raters did not improve clearly on any "
                     "measure that is comparable across the phases." if unsure else
                     f"From {first} to {last} the raters did not improve clearly on any measure.")
        if unsure:
            lines.append(f"They also read better on {listing(unsure)}, but the phases judged "
                         "different cases and these figures are not corrected for that, so the "
                         "change may be the cases'.")
    if len(phases) > 2:
        end = phases[-2]  # the last consecutive change: end of training to follow-up
        slips = {m: _change_between(panel["metrics"][m]["trained"], end, last) or {} for m in metrics}
        faded = [METRIC_WORDS[m] for m, ch in slips.items()
                 if change_word(m, ch.get("ci_low"), ch.get("ci_high")) == "worse"]
        lines.append(f"From {end} to {last} the trained raters slipped back on "
                     f"{listing(faded)}." if faded else
                     f"From {end} to {last} the trained raters did not slip back clearly on "
                     "any measure.")
    return tuple(lines)


def detectable_reading(verdict: str | None, delta: float | None, detectable: float | None) -> str:
    """What a panel's estimate says beside the smallest change the design could detect:
    ``verdict`` the estimate's word (the training effect's, or without a control group the
    trained arm's mean change first to last), ``delta`` the estimate."""
    if not _finite(detectable):
        return "not computed"
    if verdict == "no clear change":
        return (f"this design could only have seen a change of {fmt(detectable)} or larger; "
                "a smaller one may be hidden")
    if verdict == "mixed":
        return ("mixed: the difference in changes and the estimate allowing for the start disagree, "
                f"so no change is credited; this design could see a change of {fmt(detectable)} or larger")
    if verdict is None:
        return f"could see a change of {fmt(detectable)} or larger"
    if _finite(delta) and abs(delta) < detectable:
        return (f"the change is clear ({verdict}), though smaller than the {fmt(detectable)} this "
                "design would see 80% of the time")
    return f"the change is clear ({verdict}) and as large as this design could see"


# ------------------------------------------------------------- comparison.json

def _change_between(block: Mapping | None, first: str, last: str) -> Mapping | None:
    for ch in (block or {}).get("changes") or []:
        if ch.get("from") == first and ch.get("to") == last:
            return ch
    return None


def _as_change(effect: Mapping) -> dict:
    """A training effect read as a change (``estimate`` as ``delta``)."""
    return {**effect, "delta": effect.get("estimate", effect.get("delta"))}


def answers(comparison: Mapping) -> dict:
    """The first page's answers, from a comparison.json mapping: ``worked``, ``for_whom``,
    ``lasts`` and ``regression_to_mean`` (None when there is nothing to say)."""
    phases = list(comparison["phases"])
    first, last = phases[0], phases[-1]
    panel = comparison["panel"]
    raters = comparison.get("raters") or []
    has_control = bool(comparison.get("has_control"))
    metrics = list(raters[0]["metrics"]) if raters else list(panel["metrics"])
    effects = panel.get("training_effect") or None
    trained = {m: ch for m, arms in panel["metrics"].items()
               if (ch := _change_between(arms.get("trained"), first, last)) is not None}
    per_rater = [(bool(r["trained"]), {m: ch for m, block in r["metrics"].items()
                                       if (ch := _change_between(block, first, last)) is not None})
                 for r in raters]
    follow = None
    if len(phases) >= 3:
        end = phases[-2]
        if has_control and panel.get("follow_up_effect"):
            follow = dict(panel["follow_up_effect"])
        else:
            follow = {m: ch for m, arms in panel["metrics"].items()
                      if (ch := _change_between(arms.get("trained"), end, last)) is not None}
    overall = effects if has_control and effects else trained
    return {"worked": worked_sentence(phases, has_control=has_control, metrics=metrics, effects=effects,
                                      trained_changes=trained),
            "for_whom": for_whom_sentence(phases, has_control=has_control, metrics=metrics, raters=per_rater),
            "lasts": lasts_sentence(phases, has_control=has_control, metrics=metrics, follow_up=follow,
                                    overall=overall),
            "regression_to_mean": regression_to_mean_sentence(has_control=has_control, metrics=metrics,
                                                              effects=effects)}


def annotate(comparison: dict) -> dict:
    """comparison.json with its words: ``verdict`` on every change and training effect (from
    :func:`change_word` / :func:`effect_word`), the first page's ``answers`` and ``better``
    (which way is better for each figure: "higher", "lower" or null). Returns the same
    mapping, changed in place."""
    def mark(name: str, block: Mapping | None) -> None:
        for ch in (block or {}).get("changes") or []:
            ch["verdict"] = change_word(name, ch.get("ci_low"), ch.get("ci_high"))

    for r in comparison.get("raters") or []:
        for name, block in r["metrics"].items():
            mark(name, block)
        for cue, block in (r.get("shares") or {}).items():
            mark(f"share of {cue}", block)
    panel = comparison["panel"]
    for name, arms in panel["metrics"].items():
        for block in arms.values():
            mark(name, block)
    for key in ("training_effect", "follow_up_effect"):
        for name, effect in (panel.get(key) or {}).items():
            effect["verdict"] = effect_word(name, effect)
    for name in ("icc", "alpha"):
        mark(name, (panel.get("agreement") or {}).get(name))
    for name, arms in (panel.get("convergence") or {}).items():
        for block in (arms or {}).values():
            mark(name, block)
    first, last = comparison["phases"][0], comparison["phases"][-1]
    for name, entry in (panel.get("detectable") or {}).items():
        effect = (panel.get("training_effect") or {}).get(name)
        estimate = (_as_change(effect) if effect else
                    _change_between((panel["metrics"].get(name) or {}).get("trained"), first, last)) or {}
        entry["reading"] = detectable_reading(estimate.get("verdict"), estimate.get("delta"),
                                              entry.get("panel"))
    comparison["answers"] = answers(comparison)
    comparison["better"] = {name: {1: "higher", -1: "lower"}.get(BETTER.get(name, PANEL_BETTER.get(name)))
                            for name in [*panel["metrics"], *PANEL_BETTER]}
    return comparison


__all__ = ["BETTER", "METRIC_LABELS", "METRIC_WORDS", "PANEL_BETTER", "annotate", "answers", "change_word",
           "comparison_summary", "detectable_reading", "effect_word", "for_whom_sentence", "lasts_sentence",
           "listing", "rater_change_sentence", "regression_to_mean_sentence", "worked_sentence"]
