"""Every word the reports put on a number, in one place.

Each threshold that turns a figure into words names its source, or says that it
is our own choice. Change a band here and every report follows.

Tone: the sentences are about the task (a cue, a case, the scale), never about
the person. Feedback aimed at the self rather than the task tends to lower later
performance (Kluger & DeNisi 1996, Psychological Bulletin 119:254-284; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..formatting import fmt, signed

# --------------------------------------------------------------------- bands


@dataclass(frozen=True)
class Band:
    """A half-open band ``low <= value < high`` and the words for it."""

    low: float
    high: float
    words: str


@dataclass(frozen=True)
class Scale:
    """Ordered bands for one kind of figure, with where the cut points come from."""

    name: str
    bands: tuple[Band, ...]
    source: str

    def words(self, value: float | None) -> str | None:
        if value is None:
            return None
        for band in self.bands:
            if band.low <= value < band.high:
                return band.words
        return self.bands[-1].words if value >= self.bands[-1].high else self.bands[0].words


INF = float("inf")

# The ICC lines follow a guideline we recall from Koo & Li (2016), J. Chiropractic
# Medicine 15:155-163 (from memory; not checked here, so the reports call the bands our
# own rule of thumb and print no citation for them).
ICC_BANDS = Scale("ICC", (
    Band(-INF, 0.50, "poor"),
    Band(0.50, 0.75, "moderate"),
    Band(0.75, 0.90, "good"),
    Band(0.90, INF, "excellent"),
), "our own rule of thumb for ICC (lines at .50, .75 and .90)")

# The alpha lines follow what we recall of Krippendorff (2004), Content Analysis, 2nd ed.,
# p. 241 (from memory; not checked here, so the reports call them our own rule of thumb).
ALPHA_BANDS = Scale("Krippendorff's alpha", (
    Band(-INF, 0.667, "too low to rely on"),
    Band(0.667, 0.800, "enough only for tentative conclusions"),
    Band(0.800, INF, "reliable"),
), "our own rule of thumb for alpha (lines at .667 and .800)")

# Consistency R_s and test-retest r: our own choice. The .70 line matches the
# 'inconsistent' flag of calibrate.policy and calibrate.consistency; .80 is near the
# mean R_s of expert judges reported by Karelaia & Hogarth (2008) (from memory).
CONSISTENCY_BANDS = Scale("consistency", (
    Band(-INF, 0.70, "follow the cues less closely than is usual"),
    Band(0.70, 0.80, "follow the cues fairly closely"),
    Band(0.80, 0.90, "follow the cues closely"),
    Band(0.90, INF, "follow the cues very closely"),
), "our own choice (the .70 line is the tool's flag for low consistency)")

RETEST_BANDS = Scale("test-retest", (
    Band(-INF, 0.70, "often differed"),
    Band(0.70, 0.85, "mostly agreed"),
    Band(0.85, INF, "agreed closely"),
), "our own choice (the .70 line is the tool's flag for low test-retest)")

# Misallocation = 1/2 sum |share - rubric share|: 0 means the rubric's weights exactly,
# 1 means all weight on cues the rubric ignores. Bands: our own choice.
MISALLOCATION_BANDS = Scale("misallocation", (
    Band(-INF, 0.10, "sits close to the rubric"),
    Band(0.10, 0.25, "differs from the rubric on some cues"),
    Band(0.25, INF, "differs widely from the rubric (0.25 or more; a size, not a test)"),
), "our own choice")

# Matching G (correlation between two linear models' predictions): our own choice.
MATCH_BANDS = Scale("G", (
    Band(-INF, 0.70, "rank files differently"),
    Band(0.70, 0.90, "rank files similarly"),
    Band(0.90, INF, "rank files almost the same way"),
), "our own choice")

# Range use: the rater's SD of judgments over the panel's. Our own choice.
RANGE_BANDS = Scale("range use", (
    Band(-INF, 0.75, "a narrower part of the scale than the panel"),
    Band(0.75, 1.25, "about as much of the scale as the panel"),
    Band(1.25, INF, "a wider part of the scale than the panel"),
), "our own choice")

# Peers are shown only as an anonymous distribution and only from this many raters
# up: with fewer, a median can reveal a colleague's figure. Our own rule (DESIGN.md).
MIN_PANEL_FOR_PEERS = 5
# A group's pooled policy is shown to a member only when the group has this many
# raters: a group of two would show the other member's weights. Our own rule.
MIN_GROUP_FOR_PEERS = 3

# ------------------------------------------------------------------ readings


def term_words(term: str) -> str:
    """A model term as a reader reads it: 'test_score:missing' is 'test_score (value missing)',
    'recommendation=mixed' is 'recommendation: mixed' (against the most common level)."""
    if term.endswith(":missing"):
        return f"{term[:-len(':missing')]} (value missing)"
    if "=" in term:
        cue, level = term.split("=", 1)
        return f"{cue}: {level}"
    return term


def fmt_p(value: float | None) -> str:
    """A p-value as printed in every report: three decimals, and '<0.001' below that
    (never '0.000', which would claim an impossible p of zero)."""
    if value is None:
        return "n/a"
    return "<0.001" if value < 0.001 else fmt(value, 3)


# A study without cues (agreement-only data): what the reports can and cannot say.
NO_CUES_PANEL = ("The study lists no cues, so cue weights, groups of raters with similar policies and "
                 "the pairwise view are left out; agreement, severity, readers per file and the files "
                 "view use the judgments alone.")
NO_CUES_RATER = ("It compares your judgments with your colleagues' on the same cases: how high you "
                 "score, how much of the scale you use and how closely you agree. The study lists no "
                 "cues, so it cannot say how you weigh them.")


def consistency_reading(r_s: float | None) -> str:
    words = CONSISTENCY_BANDS.words(r_s)
    if words is None:
        return "Not available for this study."
    return f"Your judgments {words}: a single weighted rule of the cues reproduces them to R_s = {fmt(r_s)}."


def retest_reading(r: float | None, n_pairs: int | None, measure: str = "first_repeat_r",
                   presentations: int = 2, pairs: int = 1) -> str:
    """The test-retest sentence. ``measure`` (results.json ``retest.measure``) says which
    figure ``r`` is: the first judgment against its repeat, or the mean r over the ``pairs``
    pairs of ``presentations`` showings of ``n_pairs`` cases ([judgment] repeats = "all")."""
    words = RETEST_BANDS.words(r)
    if words is None:
        return "No case was shown to you more than once, so test-retest is not available."
    cases = f"the {n_pairs} cases" if n_pairs else "the cases"
    if measure == "mean_pairwise_r" and presentations > 2:
        return (f"On {cases} shown to you {presentations} times, your judgments of the same case {words} "
                f"(test-retest r = {fmt(r)}, the mean over the {pairs} pairs of showings).")
    return (f"On {cases} you judged more than once, your first and second judgments {words} "
            f"(test-retest r = {fmt(r)}).")


def presentations_text(n_cases: int, n_repeats: int, n_presentations: int | None,
                       most_presentations: int | None) -> str:
    """'100 cases (15 shown twice)': the cases judged and how often repeated ones were shown.

    ``n_presentations`` and ``most_presentations`` count every time a case was put before
    the rater, including the presentations after the second that the audit drops; None
    (results written before they were recorded) says only "more than once"."""
    text = f"{n_cases} case" + ("" if n_cases == 1 else "s")
    if not n_repeats:
        return text
    if most_presentations is None or n_presentations is None or most_presentations < 2:
        how = "shown more than once"
    elif most_presentations == 2:
        how = "shown twice"
    elif n_presentations == n_cases + n_repeats * (most_presentations - 1):
        how = f"each shown {most_presentations} times"
    else:
        how = f"shown between two and {most_presentations} times"
    return f"{text} ({n_repeats} of them {how})"


def only_first_two_used(most_presentations: int | None) -> str | None:
    """The sentence saying that test-retest keeps two judgments of a case shown more often."""
    if most_presentations is None or most_presentations <= 2:
        return None
    return ("Test-retest uses your first two judgments of each repeated case; the later "
            "presentations are left out of every figure.")


def repeats_note(mode: str, n_repeats: int, most_presentations: int | None,
                 measure: str | None) -> str | None:
    """Which presentations the figures use ([judgment] repeats, results.json
    ``repeats_mode``), and which test-retest figure is shown (``retest.measure``)."""
    if mode != "all":
        return only_first_two_used(most_presentations)
    if not n_repeats:
        return None
    if measure == "mean_pairwise_r":
        retest = ("test-retest is the mean correlation over every pair of showings of the cases "
                  "shown equally often")
    elif measure is None:
        retest = "test-retest could not be computed"
    else:
        retest = ("test-retest compares your first two judgments of each repeated case (too few cases "
                  "were shown equally often to compare every showing)")
    return ("Every showing of a case is used: your policy, the lens model and the other figures "
            "about your weights use your mean judgment of each case; agreement and severity use your "
            f"first judgment of each case; {retest}.")


def panel_repeats_note(entries) -> str | None:
    """The panel summary's line on cases shown more than twice: which showings were used
    and which test-retest figure the "Retest r" column shows (``repeats_mode`` and
    ``retest.measure`` of each rater entry)."""
    most = max((e.most_presentations or 0) for e in entries) if entries else 0
    if most <= 2 and not any(e.repeats_mode == "all" and e.n_repeats for e in entries):
        return None
    if not any(e.repeats_mode == "all" for e in entries):
        return (f"Some cases were shown up to {most} times; as [judgment] repeats = \"first-two\" asks, only "
                "the first judgment of a case and its first repeat are used, and the later showings are "
                "left out of every figure.")
    over = sum(1 for e in entries if e.retest is not None and e.retest.measure == "mean_pairwise_r")
    with_retest = sum(1 for e in entries if e.retest is not None)
    others = with_retest - over
    which = (f"for {over} of the {with_retest} raters with repeats, Retest r is the mean correlation over "
             "every pair of showings of the cases a rater saw equally often (ICC(A,1) and ICC(C,1) over "
             "those showings are in the retest table)")
    if others:
        which += f"; for the other {others}, the first judgment against its repeat"
    return (f"Cases were shown up to {most} times and every showing is used ([judgment] repeats = \"all\"): "
            "R_s and the other figures about weights are fitted to each rater's mean judgment of a case; "
            f"agreement, severity and the files use the first judgment; {which}.")


def flags_reading(visible: tuple[str, ...], hidden_checks: int, phase: str | None = None) -> str:
    """The first page's flag line. A check kept from the rater (by default the excluded-
    attribute check, which the chair sees) is described as hidden whatever it found,
    so the line neither claims that nothing was flagged nor reveals the hidden result."""
    where = f" in phase {phase}" if phase else ""
    if visible:
        line = f"Worth a look{where}: " + "; ".join(flag_words(f) for f in visible) + "."
    else:
        line = f"None of the checks in this report flagged anything{where}."
    if hidden_checks == 1:
        line += " One further check is shared with the chair only."
    elif hidden_checks > 1:
        line += f" {hidden_checks} further checks are shared with the chair only."
    return line


def predicted_on_scale(predicted: float | None,
                       scale: tuple[float, float] | None) -> tuple[float | None, bool]:
    """A policy's prediction as a report shows it: a straight-line rule can go past the
    ends of the scale, so a prediction beyond an end is shown at that end (and marked)."""
    if predicted is None or scale is None:
        return predicted, False
    low, high = scale
    if predicted > high:
        return high, True
    if predicted < low:
        return low, True
    return predicted, False


PREDICTION_CLIPPED_NOTE = ("* A straight-line rule can predict beyond the ends of the scale; such a "
                           "prediction is shown at the end it passed, and the difference is taken from there.")


def shares_caption(shares) -> str:
    """The caption under a weight-share chart, true for the shares it describes: R² shares
    are never negative and add up to 1; signed shares on the rubric's basis can be
    negative, and then only their sizes add up to 1."""
    values = [v for v in shares.values() if v is not None]
    if any(v < 0 for v in values):
        return ("A share is a cue's part of the whole policy; the sizes of the shares add up to 1, and a "
                "negative share means your judgments fall as the cue rises, other cues held fixed. "
                "A cue with a larger share moves your judgments more.")
    return ("A share is a cue's part of the whole policy; the shares add up to 1. "
            "A cue with a larger share moves your judgments more.")


def severity_reading(offset: float | None, se: float | None, flags=()) -> str:
    if offset is None:
        return "Not available for this study."
    if "lenient" in flags and offset > 0:
        return "Your judgments run higher than the panel's on the same cases."
    if ("severe" in flags or "strict" in flags) and offset < 0:
        return "Your judgments run lower than the panel's on the same cases."
    if offset == 0 or (se is not None and se > 0 and abs(offset) < 2 * se):
        return "Your judgments sit about at the panel's level on the same cases."
    side = "higher" if offset > 0 else "lower"
    return f"Your judgments run somewhat {side} than the panel's on the same cases."


def alignment_reading(misallocation: float | None, most_over: str | None,
                      most_under: str | None) -> str:
    words = MISALLOCATION_BANDS.words(misallocation)
    if words is None:
        return "No rubric was given, so alignment is not available."
    parts = [f"The weight you give the cues {words}."]
    if misallocation is not None and misallocation >= MISALLOCATION_BANDS.bands[1].low:
        if most_over:
            parts.append(f"Most extra weight: {most_over}.")
        if most_under:
            parts.append(f"Most missing weight: {most_under}.")
    return " ".join(parts)


def drift_reading(drift, reason: str | None = None) -> str:
    """The drift sentence from a :class:`~calibrate.report.view.DriftView` (or None)."""
    if drift is None:
        if reason:
            return f"Drift over the reading order is not available: {reason}."
        return "No reading order was recorded, so drift is not available."
    if drift.flagged:
        if drift.slope is not None and drift.slope < 0:
            return "Judgments became lower as the reading went on."
        if drift.slope is not None and drift.slope > 0:
            return "Judgments became higher as the reading went on."
        return "The way cases were judged changed over the reading order."
    return "Judgments stayed steady over the reading order."


def icc_reading(value: float | None) -> str:
    words = ICC_BANDS.words(value)
    return "not available" if words is None else words


def agreement_reading(r: float | None) -> str:
    words = MATCH_BANDS.words(r)
    if words is None:
        return "Not available for this study."
    return f"On the cases you shared with colleagues, you and the panel {words}."


# The identifiers of calibrate.consistency.consistency_verdict, in plain words.
CEILING_VERDICTS = {
    "model_misses_rule": "Your repeated judgments agree with each other more closely than a straight-line "
                         "rule of these cues follows your judgments: information beyond the listed cues, "
                         "or cut-offs and combinations of cues, may be shaping them.",
    "inconsistent": "Both figures are clearly low: the same case can get a different judgment on another "
                    "reading, and that limits how closely any rule can follow the judgments.",
    "cannot_tell": "With this many repeated cases the two figures cannot be told apart; the uncertainty is "
                   "wider than the gap between them.",
}

# --------------------------------------------------------------- context values


@dataclass(frozen=True)
class Context:
    figure: str
    value: str
    source: str


# Yardsticks printed in the rater's report. Each is a figure read from its source, an
# identity the test suite checks, or our own rule. The meta-analytic averages we recall
# for R_s (about .80) and for the model of the judge beating the judge (Karelaia &
# Hogarth 2008; from memory) are not checked here, so the first row states our own
# line and the third the identity that explains the finding.
PUBLISHED_CONTEXT = (
    Context("consistency R_s", ".80 or more: close", "our own rule of thumb"),
    Context("test-retest of judgments in policy capturing", "about .78 on average",
            "Zhu, Tomassetti, Dalal et al. (2022), Organizational Research Methods "
            "25:541-574 (from the abstract)"),
    Context("the model of the judge against the judge", "as good or better when C = 0",
            "lens model equation (Tucker 1964): with C = 0, r_a = G R_e R_s, never further from "
            "zero than G R_e, the model's validity"),
)

CONTEXT_INTRO = ("Yardsticks for reading your figures: a published average, our own rule of thumb, "
                 "and an identity of the lens model.")

# ------------------------------------------------------------------- cautions

CAUTION_LINE = ("A statistical description of judgments on a sample of cases, not a verdict "
                "on a person.")

CAUTIONS = (
    "These figures describe patterns in judgments on a sample of cases. They are not a "
    "verdict on anyone's ability or character.",
    "Weights estimated from a modest number of cases are unstable: a cue's weight can move "
    "noticeably with a different set of cases. Read the intervals, not just the estimates.",
    "A statistical association with a cue or an attribute does not show why a judgment "
    "was made.",
    "Decisions about people follow the institution's own policies and the applicable law, "
    "not these figures alone.",
)

LENS_SELECTED_CAUTION = (
    "The outcome was recorded only for selected cases (those admitted on these judgments), "
    "so the lens figures are biased and are best read as a rough guide.")

# ------------------------------------------------------------------- glossary

GLOSSARY = {
    "cue": "A piece of information about a case that a judgment can use (for example a grade).",
    "policy": "The weighted rule of the cues that best reproduces a set of judgments "
              "(a linear regression of the judgments on the cues).",
    "weight share": "A cue's part of the policy's total weight; the sizes of the shares add up to 1.",
    "R_s (consistency)": "How closely the judgments follow their own policy: the correlation "
                         "between the judgments and the policy's predictions (0 to 1).",
    "test-retest r": "The correlation between the first and second judgments of repeated cases.",
    "sqrt(r_tt)": "The square root of test-retest r: in the population, R_s cannot exceed it; "
                  "in a small sample it is a guide, not a hard limit.",
    "severity offset": "How much higher (positive) or lower (negative) judgments run than the "
                       "panel's on the same cases, on the judgment scale.",
    "range use": "How much of the judgment scale is used, compared with the panel.",
    "drift": "A steady change in judgments over the reading order.",
    "rubric": "The weights the institution intends the cues to have.",
    "misallocation": "Half the summed differences between the policy's weight shares and the "
                     "rubric's: 0 when they match, 1 when they share nothing.",
    "G": "Matching: the correlation between the predictions of two linear models, such as "
         "a policy and the rubric, or a policy and the outcome's model.",
    "C": "The correlation between the parts of the judgments and of the outcome that the "
         "linear models leave unexplained.",
    "r_a": "Achievement: the correlation between the judgments and the outcome.",
    "R_e": "How well the cues predict the outcome with the best linear rule.",
    "group": "Raters whose policies are similar enough to share one rule without losing much fit.",
    "ICC": "Intraclass correlation: agreement between raters on the same cases (0 to 1).",
    "Krippendorff's alpha": "Agreement among raters beyond chance, allowing missing judgments.",
    "case to look at again": "A case whose judgment is far from what the rater's own policy "
                             "predicts for it.",
}

# ---------------------------------------------------------------------- flags

# Plain words for the flag identifiers the analyses set (about the task, not the person).
FLAG_WORDS = {
    "too_few_cases": "too few cases to fit a policy",
    "few_cases": "few cases per cue, so the weights are rough",
    "not_fitted": "no policy could be fitted",
    "collinear_cues": "some cues move together, so their separate weights are uncertain",
    "curvature": "the judgments bend away from a straight-line rule of the cues",
    "inconsistent": "the judgments follow the cues less closely than usual",
    "separation": "a yes/no rule splits the cases perfectly, so odds weights are unbounded",
    "low_retest": "repeated cases were often judged differently the second time",
    "lenient": "judgments run higher than the panel's on the same cases",
    "severe": "judgments run lower than the panel's on the same cases",
    "narrow_range": "a narrow part of the scale is used",
    "wide_range": "a wide part of the scale is used",
    "central_tendency": "many judgments sit in the middle of the scale",
    "drift": "judgments changed over the reading order",
    "cutoff_rule": "judgments jump at one point on a cue, like a cut-off",
    "excluded_attribute": "judgments are associated with an attribute that must not count",
}


def chance_flags_sentence(n_tests: int, panelwise_rate: float | None, expected: float | None,
                          shown: int, phase: str | None = None) -> str:
    """How many tested flags chance alone would show, next to how many are shown (results.json
    ``panels[].chance_flags``; Holm across every tested flag of the phase)."""
    lead = f"Phase {phase}: b" if phase else "B"
    if not n_tests or panelwise_rate is None or expected is None:
        return (f"{lead}y chance alone no tested flag can appear: no rater could be tested for curvature, "
                "cut-offs, drift, excluded attributes or test-retest.")
    shows = "none" if shown == 0 else ("1" if shown == 1 else f"{shown}")
    return (f"{lead}y chance alone, raters with none of the tested patterns would get about "
            f"{fmt(expected)} tested flags here (at most a {100 * panelwise_rate:.0f}% chance of any, "
            f"over {n_tests} tests); this panel shows {shows} tested flag{'' if shown == 1 else 's'} "
            "(the other flags are rules on the figures or on the data, not tests, so chance is not counted "
            "for them).")


def retest_reach_sentence(n_pairs: int | None, detectable_below: float | None,
                          measure: str = "first_repeat_r", presentations: int = 2) -> str | None:
    """What the low test-retest check can catch (results.json ``retest.flag_detectable_below``);
    over every showing (``measure`` mean_pairwise_r) the check tests ICC(C,1), so it says so."""
    if not n_pairs:
        return None
    cases = f"{n_pairs} repeated case" + ("s" if n_pairs != 1 else "")
    if measure == "mean_pairwise_r":
        cases += f" shown {presentations} times" if presentations > 2 else " shown twice"
    if detectable_below is None or detectable_below <= -1:
        return f"With {cases} the low test-retest check cannot flag anyone."
    if measure == "mean_pairwise_r":
        return (f"With {cases} the low test-retest check, made on ICC(C,1) over the showings, can only flag "
                f"a value below {fmt(detectable_below)}.")
    return f"With {cases} the low test-retest check can only flag a correlation below {fmt(detectable_below)}."


def retest_reach_panel_sentence(fewest: int, most: int, highest: float | None,
                                phase: str | None = None, *, over_showings: bool = False) -> str:
    """The same for a phase's raters who were not flagged: the most the check could catch.
    ``over_showings``: some of them were checked on ICC(C,1) over every showing."""
    cases = f"{fewest}" if fewest == most else f"{fewest} to {most}"
    lead = f"Phase {phase}: w" if phase else "W"
    if highest is None or highest <= -1:
        return f"{lead}ith {cases} repeated cases per rater the low test-retest check could not flag anyone."
    what = "correlation (or ICC(C,1) over the showings)" if over_showings else "correlation"
    return (f"{lead}ith {cases} repeated cases per rater the low test-retest check could flag only a "
            f"{what} below {fmt(highest)} (at best).")


def flag_words(flag: str) -> str:
    return FLAG_WORDS.get(flag, flag.replace("_", " "))


def to_text(value) -> str:
    """A value as text for the reports (the embedded font covers Latin, Greek and Cyrillic;
    control characters are dropped)."""
    return "".join(ch for ch in str(value) if ch.isprintable())


#: The chair's summary line naming the raters whose lens fit has under 10 cases per model
#: term (the per-rater ``lens.small_sample`` of results.json decides who is named).
LENS_SMALL_SAMPLE_PANEL = ("Lens figures of {raters} rest on fewer than 10 cases with a known outcome "
                           "per model term: read them as rough, and their intervals as wide.")


# ------------------------------------------------------------ the chair's first page
# Every sentence of page 1 of the panel summary comes from a function below, given the
# figures it prints; tests/unit/test_panel_page_one.py checks each against its numbers.

#: Flags in the order page 1 raises them: what concerns fairness first, then what a
#: conversation can change (consistency, level, drift, rules), then the shape of the
#: judgments. Our own order.
CONVERSATION_ORDER = ("excluded_attribute", "inconsistent", "low_retest", "severe", "lenient", "drift",
                      "cutoff_rule", "curvature", "narrow_range", "wide_range", "central_tendency")

#: Flags about the data a rater was given (too few cases, cues that move together), not
#: about how the rater judged: page 1 lists them after the others and never names a
#: rater for a conversation because of them. The same set as results.json
#: ``panels[].chance_flags.data_conditions``.
DATA_CONDITIONS = ("too_few_cases", "not_fitted", "few_cases", "collinear_cues", "separation")

#: The significance level of page 1's claims on tested figures (two-sided, after Holm).
CLAIM_ALPHA = 0.05


def flag_rank(flag: str) -> int:
    """Where a flag stands in :data:`CONVERSATION_ORDER` (unknown flags after known
    ones, data conditions last)."""
    if flag in CONVERSATION_ORDER:
        return CONVERSATION_ORDER.index(flag)
    if flag in DATA_CONDITIONS:
        return len(CONVERSATION_ORDER) + 1 + DATA_CONDITIONS.index(flag)
    return len(CONVERSATION_ORDER)


def _interval(interval, digits: int = 2) -> str:
    if not interval:
        return ""
    return f", 95% interval {fmt(interval[0], digits)} to {fmt(interval[1], digits)}"


def _p_holm(p: float | None) -> str:
    if p is None:
        return ""
    shown = fmt_p(p)
    return f"p (Holm) {shown}" if shown.startswith("<") else f"p (Holm) = {shown}"


def flag_figure_text(figure) -> str:
    """The number behind a flag, with its interval or adjusted p, from a
    :class:`~calibrate.report.view.FlagFigure` (empty when the audit recorded none)."""
    if figure is None or (figure.value is None and figure.p_adjusted is None):
        return ""
    m, v = figure.measure, figure.value
    p = _p_holm(figure.p_adjusted)
    if m == "r_s":
        return f"R_s = {fmt(v)}{_interval(figure.interval)}"
    if m == "retest_r":
        on = f" on {figure.about} repeated cases" if figure.about else ""
        return f"test-retest r = {fmt(v)}{_interval(figure.interval)}{on}"
    if m == "offset":
        return f"offset {signed(v)} scale points{_interval(figure.interval)}"
    if m == "drift_level":
        return (f"{signed(v)} scale points from first to last file{_interval(figure.interval)}"
                + (f", {p}" if p else ""))
    if m == "drift_consistency":
        return (f"R_s from the first half to the second {signed(v)}{_interval(figure.interval)}"
                + (f", {p}" if p else ""))
    if m == "cutoff":
        at = f"{figure.about} = {fmt(v)}" if figure.about else f"{fmt(v)}"
        return f"a step at {at}" + (f", {p}" if p else "")
    if m == "added_r2":
        who = figure.about or "the attribute"
        return f"{who} adds R² {fmt(v, 3)}" + (f", {p}" if p else "")
    if m == "bend_test":
        return f"test of a bend: {p}" if p else ""
    if m == "cases_per_term":
        return f"{fmt(v, 1)} cases per weight"
    if m == "n_cases":
        return f"{fmt(v, 0)} cases"
    if m == "sd_ratio":
        return f"spread of judgments {fmt(v)} times the panel's"
    if m == "middle_share":
        panel = f", against {fmt(100 * figure.reference, 0)}% for the panel" if figure.reference is not None else ""
        return f"{fmt(100 * v, 0)}% of judgments in the middle of the scale{panel}"
    if m == "vif":
        return f"variance inflation {fmt(v, 1)} for {figure.about}"
    return fmt(v)


def flag_reason(flag: str, figure=None) -> str:
    """One reason on page 1: the flag in plain words, then its number and interval."""
    figure_text = flag_figure_text(figure)
    return flag_words(flag) + (f" ({figure_text})" if figure_text else "")


def panel_wide_flags(flag_sets) -> tuple[str, ...]:
    """Flags that every rater of a phase carries (with at least two raters): page 1 and
    the flags-first list state them once for the panel instead of once per rater."""
    flag_sets = [set(f) for f in flag_sets]
    if len(flag_sets) < 2:
        return ()
    common = set.intersection(*flag_sets)
    return tuple(sorted(common, key=lambda f: (flag_rank(f), f)))


def panel_wide_flag_sentence(flag: str, values, n_raters: int, phase: str | None = None,
                             every_phase: bool = False) -> str:
    """'All 29 raters: few cases per cue, so the weights are rough (4.7 cases per weight
    for each).' ``values`` are the figures behind the flag, one per rater entry (None where
    absent); ``every_phase`` when it is shared by every rater in every phase."""
    where = " in every phase" if every_phase else (f" in phase {phase}" if phase else "")
    line = f"All {n_raters} raters{where}: {flag_words(flag)}"
    figures = [f for f in values if f is not None and f.value is not None]
    if figures and len(figures) == len(values) and len({f.measure for f in figures}) == 1 and \
            figures[0].measure in ("cases_per_term", "n_cases", "r_s", "sd_ratio"):
        digits = 1 if figures[0].measure == "cases_per_term" else (0 if figures[0].measure == "n_cases" else 2)
        low, high = min(f.value for f in figures), max(f.value for f in figures)
        unit = {"cases_per_term": " cases per weight", "n_cases": " cases", "r_s": "", "sd_ratio": ""}[
            figures[0].measure]
        lead = {"r_s": "R_s ", "sd_ratio": "spread ratio "}.get(figures[0].measure, "")
        span = (f"{fmt(low, digits)}{unit} for each" if fmt(low, digits) == fmt(high, digits)
                else f"{lead}{fmt(low, digits)} to {fmt(high, digits)}{unit}")
        line += f" ({lead if fmt(low, digits) == fmt(high, digits) else ''}{span})"
    if flag in DATA_CONDITIONS:
        return line + ". This is a feature of the study, so no rater is named for it."
    return line + ". A pattern of the whole panel: it is stated once here rather than for each rater."


def icc_verdict(estimate: float | None, interval=None) -> str:
    """An ICC in words, as far as its interval allows: one band word when the whole
    interval lies in that band, otherwise the bands of its two ends ('poor to moderate')."""
    words = ICC_BANDS.words(estimate)
    if words is None:
        return "not available"
    if not interval:
        return words
    low, high = ICC_BANDS.words(interval[0]), ICC_BANDS.words(interval[1])
    return low if low == high else f"{low} to {high}"


def readers_text(k: float | None) -> str:
    """'4 readers per file', or '3.6 readers per file on average' (the harmonic mean the
    k-reader ICC forms use when files got different numbers of readers)."""
    if k is None:
        return "the readers each file had"
    if abs(k - round(k)) < 0.05:
        n = int(round(k))
        return f"{n} reader" + ("" if n == 1 else "s") + " per file"
    return f"{fmt(k, 1)} readers per file on average"


def decision_reliability_text(estimate: float | None, interval, k: float | None) -> str:
    """The reliability of the decisions as the files were actually read: ICC(A,k) for
    the mean of the k readers each file got (k = the harmonic mean readers per file)."""
    if estimate is None:
        return "not available"
    return (f"{icc_verdict(estimate, interval)}: {fmt(estimate)}{_interval(interval)}, "
            f"with {readers_text(k)}")


def single_reader_text(estimate: float | None, interval) -> str:
    """Single-rater agreement ICC(A,1), with its verdict."""
    if estimate is None:
        return "not available"
    return f"{icc_verdict(estimate, interval)}: {fmt(estimate)}{_interval(interval)}"


def alpha_text(value: float | None, interval=None) -> str:
    if value is None:
        return "not available"
    low, high = (ALPHA_BANDS.words(interval[0]), ALPHA_BANDS.words(interval[1])) if interval else (None, None)
    words = ALPHA_BANDS.words(value) if not interval or low == high else f"between {low} and {high}"
    return f"{words}: {fmt(value)}{_interval(interval)}"


def policies_alike_answer(p_value: float | None) -> str:
    """'Policies alike?' answered in words from the homogeneity test's p."""
    if p_value is None:
        return "Not tested in this study."
    shown = fmt_p(p_value)
    p = f"p {shown[0]} {shown[1:]}" if shown.startswith("<") else f"p = {shown}"
    if p_value < CLAIM_ALPHA:
        return f"No: the raters weigh the cues differently ({p})."
    return (f"Not shown to differ: the test finds no clear difference in how the raters weigh the "
            f"cues ({p}); that is not proof that they weigh them alike.")


#: model_vs_rater verdicts (calibrate.lens.model.VERDICTS) in the words of the lens section.
MODEL_VS_RATER_WORDS = {
    "model_better": "the model of the rater predicted the outcome better",
    "rater_better": "the rater predicted the outcome better than the model",
    "about_same": "cannot be told apart on these cases",
    "neither_tracks": "neither tracked the outcome clearly",
    "not_available": "too few cases with a known outcome",
}


def lens_panel_sentence(verdicts, gains=()) -> str:
    """Page 1's lens result: how many raters' own models out-predicted them.

    ``verdicts`` are the raters' model_vs_rater verdicts; ``gains`` the (rater, gain,
    low, high) of those the model beat, largest first, of which three are named."""
    verdicts = list(verdicts)
    n = len(verdicts)
    tested = [v for v in verdicts if v != "not_available"]
    if not tested:
        return "Too few cases with a known outcome to compare any rater with a model of their own policy."
    better = verdicts.count("model_better")
    worse = verdicts.count("rater_better")
    same = verdicts.count("about_same")
    neither = verdicts.count("neither_tracks")
    missing = n - len(tested)
    parts = [f"{better} of {n} raters were out-predicted by a model of their own policy (the gain's "
             "interval above zero)"]
    if worse:
        parts.append(f"{worse} out-predicted their model")
    if same:
        parts.append(f"{same} cannot be told apart from it")
    if neither:
        parts.append(f"for {neither} neither tracked the outcome clearly")
    if missing:
        parts.append(f"{missing} had too few cases with a known outcome")
    line = "; ".join(parts) + "."
    named = list(gains)[:2]
    if named:
        line += (" Largest gain: " if len(named) == 1 else " Largest gains: ") + ", ".join(
            f"{r} {signed(g)} ({fmt(lo)} to {fmt(hi)})" for r, g, lo, hi in named) + "."
    return line


# --------------------------------------------------------------- next steps


def step_conversation(rater: str | None, flag: str | None, figure=None, others=(),
                      phase: str | None = None) -> str:
    """Next step 1: the reader to talk with first, and why; ``others`` the further
    readers flagged for how they judged (not for the data they had), in order."""
    if rater is None or flag is None:
        return ("No reader needs a conversation on these checks: no rater-specific flag was set "
                "beyond what chance alone would give.")
    where = f" (phase {phase})" if phase else ""
    others = list(others)
    more = ""
    if len(others) == 1:
        more = f" Then {others[0]}."
    elif 1 < len(others) <= 3:
        more = f" Then {', '.join(others[:-1])} and {others[-1]}."
    elif len(others) > 3:
        more = f" Then {', '.join(others[:3])} and {len(others) - 3} more (the every-rater table lists them all)."
    return f"Talk first with {rater}{where}: {flag_reason(flag, figure)}.{more}"


def cue_to_discuss(per_cue: dict) -> tuple[str | None, float | None]:
    """The cue on which the raters' weights differ most clearly: the smallest p of the
    per-cue tests of equal weights (largest statistic on ties), with its Holm-adjusted p
    (for the smallest p, Holm's first step: p times the number of cues)."""
    tested = [(c, s, p) for c, (s, p) in per_cue.items() if p is not None]
    if not tested:
        return None, None
    cue, _, p = min(tested, key=lambda t: (t[2], -(t[1] or 0.0)))
    return cue, min(1.0, p * len(tested))


def step_cue(cue: str | None, p_adjusted: float | None) -> str:
    """Next step 2: the cue to agree on as a panel."""
    if cue is None or p_adjusted is None:
        return "Compare the cue weights by rater (the heat map below) before the next round of reading."
    if p_adjusted < CLAIM_ALPHA:
        return (f"Agree as a panel how much {cue} should count: it is the cue whose weight differs most "
                f"clearly between raters ({_p_holm(p_adjusted)}, across the cues).")
    return (f"No single cue's weight differs clearly between raters (the clearest, {cue}: "
            f"{_p_holm(p_adjusted)}, across the cues); the weights are worth a look, not a ruling.")


def readers_target(needed: dict, reached_now: float | None) -> tuple[float | None, int | None]:
    """The target reliability to plan for: the lowest target of ``readers_needed.phi``
    ({"0.70": 3, "0.80": 5}) that the decisions do not reach now (else the highest)."""
    targets = []
    for key, n in (needed or {}).items():
        try:
            targets.append((float(key), None if n is None else int(n)))
        except (TypeError, ValueError):
            continue
    if not targets:
        return None, None
    targets.sort()
    for target, n in targets:
        if reached_now is None or reached_now < target:
            return target, n
    return targets[-1]


def step_readers(k_now: float | None, reached_now: float | None, target: float | None,
                 needed: int | None, reached_at_needed: float | None, interval_now=None) -> str:
    """Next step 3: how many readers per file would reach the target reliability
    (D-study of the variance components; phi, the absolute form, as decisions at a
    cut-off use the level of the mean). ``reached_now`` is ICC(A,k) of the files as
    read, ``interval_now`` its 95% interval: the target counts as reached for sure
    only when the whole interval lies above it."""
    if target is None:
        return "The readers-per-file study is not available for this study."
    now = readers_text(k_now)
    if reached_now is not None and reached_now >= target:
        if interval_now and interval_now[0] < target:
            return (f"Keep at least {now}: the decisions reach a reliability of {fmt(reached_now)}"
                    f"{_interval(interval_now)}; the target of {fmt(target)} lies inside the interval, so it "
                    "is likely but not yet sure.")
        return (f"Keep {now}: the decisions already reach a reliability of {fmt(reached_now)}"
                f"{_interval(interval_now)}, above the target of {fmt(target)}.")
    if needed is None:
        return (f"No number of readers per file that the readers-per-file study tried brings the reliability "
                f"of the decisions to {fmt(target)}; agreeing on the cues' weights (step 2) would do more "
                "than adding readers.")
    if k_now is not None and needed <= k_now and reached_at_needed is not None:
        return (f"Give every file at least {needed} readers: the readers-per-file table puts the reliability "
                f"of the decisions with {needed} at {fmt(reached_at_needed)} (target {fmt(target)}).")
    if k_now is not None and abs(k_now - round(k_now)) < 0.05:
        extra = needed - int(round(k_now))
        now = f"{int(round(k_now))}, " + ("one more" if extra == 1 else f"{extra} more")
    else:
        now = f"now {now}"
    if reached_at_needed is None:   # beyond the rows of the printed table
        return (f"Give each file {needed} readers ({now}): the readers-per-file study puts the reliability of "
                f"the decisions at the target of {fmt(target)} from {needed} readers (now {fmt(reached_now)}).")
    return (f"Give each file {needed} readers ({now}): the reliability of the decisions would "
            f"rise from {fmt(reached_now)} to {fmt(reached_at_needed)} (target {fmt(target)}).")


def lens_number(value: float | None, with_sign: bool = False) -> str:
    return signed(value) if with_sign else fmt(value)


LENS_SECTION_INTRO = (
    "How well each rater's judgments tracked the recorded outcome, and why. r_a (achievement): the "
    "correlation of the judgments with the outcome. G (matching): how closely the rater's policy "
    "agrees with the rule that best predicts the outcome from the same cues. C: what the judgments "
    "and the outcome share beyond the cues. R_s: how closely the judgments follow the rater's own "
    "policy. R_e: how well the cues predict the outcome at all. The last columns set a model of the "
    "rater's own policy, applied the same way every time and tested on cases it had not seen, against "
    "the rater: a positive gain means the model predicted the outcome better.")

LENS_SECTION_LEGEND = (
    "Smaller figures under each number: its 95% interval, low and high end (case bootstrap, BCa; for "
    "the model's gain, Zou 2007). "
    "R_s here is on the cases with a known outcome; its interval on all cases is in the rater's own "
    "report. The lens model equation ties them together: r_a = G R_e R_s + C sqrt(1-R_e²) sqrt(1-R_s²) "
    "(Tucker 1964). A winner is named only when the gain's interval excludes zero.")


def flag_reason_by_phase(flag: str, figures) -> str:
    """A flag raised in several phases, named once: 'words (before: figure; after: figure)'.
    ``figures`` are (phase, FlagFigure or None) pairs."""
    shown = [(phase, flag_figure_text(fig)) for phase, fig in figures]
    if not any(t for _, t in shown):
        return flag_words(flag) + " (" + ", ".join(p for p, _ in shown if p) + ")"
    return flag_words(flag) + " (" + "; ".join(f"{p}: {t}" if t else f"{p}" for p, t in shown) + ")"


LENS_SELECTED_SHORT = ("The outcome is known only for selected cases, so the lens figures are biased: "
                       "a rough guide (see the lens section).")


def bands_note() -> str:
    """Page 1's one-line key to the words put on ICC and alpha (the bands above)."""
    def lines(scale):
        return ", ".join((f"{b.low:.2f}" if round(b.low, 2) == b.low else f"{b.low:.3f}").lstrip("0")
                         for b in scale.bands[1:])
    return (f"Words: our own rules of thumb (ICC lines at {lines(ICC_BANDS)}; alpha at {lines(ALPHA_BANDS)}); "
            "two words ('moderate to good'): the 95% interval spans a line.")


#: The flags in two or three words, for the every-rater table's narrow column (page 1
#: gives each in full, :data:`FLAG_WORDS`, with its figure).
FLAG_SHORT_WORDS = {
    "too_few_cases": "too few cases",
    "few_cases": "few cases",
    "not_fitted": "no policy fitted",
    "collinear_cues": "cues move together",
    "curvature": "bent rule",
    "inconsistent": "low consistency",
    "separation": "perfect split",
    "low_retest": "low test-retest",
    "lenient": "runs high",
    "severe": "runs low",
    "narrow_range": "narrow range",
    "wide_range": "wide range",
    "central_tendency": "middle of scale",
    "drift": "drift",
    "cutoff_rule": "cut-off",
    "excluded_attribute": "excluded attribute",
}


def flag_short(flag: str) -> str:
    return FLAG_SHORT_WORDS.get(flag, flag.replace("_", " "))
