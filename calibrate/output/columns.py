"""What every column of every output table holds: one sentence each, for the workbook's
read-me sheet (and for anyone reading the CSV files).

``COLUMN_NOTES`` holds the columns that mean the same in every table; ``TABLE_COLUMN_NOTES``
the columns of one table, and a name that means different things in different tables
(``n``, ``r``, ``estimate``, ``part``, ...) is described per table there, which takes
precedence. Each sentence says what the column is, its unit or range, and where it comes
from. A table or column added to the audit needs its sentence here: a test builds the
demo's and a binary study's workbook and names every column that has none.
"""

from __future__ import annotations

_HOLM_PHASE = ("Holm-adjusted across every tested flag of the phase, all raters included "
               "(the family in the chance_flags table); the flag is decided on this value")

COLUMN_NOTES: dict[str, str] = {
    "rater": "Rater id, exactly as written in the judgments table.",
    "phase": "Phase of the study the row belongs to (for example before or after a training), as "
             "named in [phases] order; 'all' in a study without phases, where the reports print no phase.",
    "case": "Case (file) id, exactly as written in the judgments table.",
    "cue": "Name of the cue (a piece of case information a judgment can use), as named in [cues].",
    "term": "Design column of the policy model: a numeric cue, its 0/1 'missing' indicator, or one "
            "level of a categorical cue written 'cue=level'.",
    "column": "Design column of the policy model: a numeric cue, its 0/1 'missing' indicator, or one "
              "level of a categorical cue written 'cue=level' (the reference level has none).",
    "ci_low": "Lower end of the 95% confidence interval of the row's estimate, in the estimate's unit.",
    "ci_high": "Upper end of the 95% confidence interval of the row's estimate, in the estimate's unit.",
    "se": "Standard error of the row's estimate, in the estimate's unit.",
    "p_value": "Unadjusted p-value (0 to 1) of the row's test; small values speak against the null "
               "hypothesis named with the test.",
    "p_adjusted": f"p-value (0 to 1) {_HOLM_PHASE}.",
    "flagged": "True when the test's adjusted p-value is below 0.05, so the row raises its flag.",
    "n_cases": "Distinct cases the rater judged in the phase (first judgments; repeats not counted).",
    "n_repeats": "Distinct cases the rater judged more than once in the phase (hidden repeats).",
    "group": "Label (A, B, ...) of the group of raters with similar weights, from the grouping tree of the phase.",
    "flags": "Flag names raised for the row, separated by spaces (each name is explained in the "
             "README's list of flags); empty when none was raised.",
    "cases_per_term": "Usable cases divided by the number of model terms; below 10 the weights are "
                      "unstable and the reports say so.",
}

TABLE_COLUMN_NOTES: dict[str, dict[str, str]] = {
    "raters": {
        "r_s": "Consistency R_s (0 to 1): correlation between the rater's judgments and the rater's own "
               "fitted policy (multiple R of the least-squares fit).",
        "r_cv": "Leave-one-out cross-validated r (-1 to 1): correlation between each judgment and the "
                "policy fitted without that case; below R_s because it does not reuse the case.",
        "retest_r": "Test-retest correlation (-1 to 1) between first and second judgments of the hidden "
                    "repeated cases; empty without repeats.",
        "severity_offset": "Severity offset in scale points: how much higher (positive, more lenient) or "
                           "lower than the panel the rater judges the same cases, from the rater + case model.",
    },
    "data_summary": {
        "n_judgments": "Every judgment row kept for the rater in the phase, repeats included.",
        "n_presentations": "Presentations of cases to the rater in the phase (first showings plus every "
                           "repeat showing); equals n_judgments unless rows were merged.",
        "most_presentations": "Largest number of times the rater saw any one case in the phase (1: no repeats).",
        "usable_cases": "Cases that enter the rater's policy fit: every cue present or filled by its "
                        "missing rule.",
    },
    "policies": {
        "intercept": "Intercept of the rater's least-squares policy, in scale points: the predicted "
                     "judgment when every cue is 0.",
        "r": "Consistency R_s (0 to 1): multiple correlation between judgments and the fitted policy.",
        "r_ci_low": "Lower end of the BCa case-bootstrap 95% interval for R_s (bias-corrected and accelerated).",
        "r_ci_high": "Upper end of the BCa case-bootstrap 95% interval for R_s (bias-corrected and accelerated).",
        "r2": "R² of the policy fit (0 to 1): share of the variance of the judgments the cues account for.",
        "r2_adj": "Adjusted R², R² corrected for the number of terms (can be below 0 for weak fits).",
        "r_cv": "Leave-one-out cross-validated r (-1 to 1): correlation of each judgment with the policy "
                "fitted without its case.",
        "cases_per_weight": "Usable cases per estimated weight; below 10 the weights are unstable.",
        "condition_number": "Condition number of the cues' correlation matrix (1 or more); the larger, the "
                            "more the cues overlap and the less certain single weights are.",
        "reset_p_value": "Unadjusted p-value of the curvature check (Ramsey's RESET: squared and cubed "
                         "fitted values added to the policy); small values suggest a curved policy.",
        "reset_p_adjusted": f"p-value of the curvature check, {_HOLM_PHASE}.",
        "tjur_r2": "Tjur's R² (0 to 1) of the logistic fit, for binary decisions only: mean predicted "
                   "probability of the 'yes' cases minus that of the 'no' cases.",
    },
    "policy_weights": {
        "estimate": "Raw weight: change in the judgment, in scale points, for one unit more of the "
                    "design column with the other cues held fixed (least squares).",
        "se": "Standard error of the raw weight (scale points per unit of the column).",
        "p_value": "Unadjusted p-value (0 to 1) of the t test that the raw weight is zero.",
        "std_weight": "Standardized weight (beta): the raw weight times the column's SD over the "
                      "judgments' SD, comparable across cues.",
        "utilization": "Cue utilization (-1 to 1): plain correlation of the judgments with the column.",
        "structure": "Structure coefficient (-1 to 1): correlation of the column with the fitted policy "
                     "(utilization divided by R_s).",
        "vif": "Variance inflation factor (1 or more) of the column: how much its overlap with the "
               "other cues inflates the variance of its weight (1: no overlap).",
        "odds_ratio": "For binary decisions: the factor by which the odds of 'yes' change for one unit "
                      "more of the column, from the logistic fit.",
    },
    "policy_importance": {
        "importance": "Share (0 to 1) of the policy's R² that belongs to the cue; the shares of a rater "
                      "add up to 1.",
        "ci_low": "Lower end of the percentile case-bootstrap 95% interval of the cue's share of R².",
        "ci_high": "Upper end of the percentile case-bootstrap 95% interval of the cue's share of R².",
        "importance_r2": "The cue's part of R² (0 to R²) as general dominance weight (Budescu 1993): its "
                         "average added R² over all subsets of the other cues.",
        "relative_weight_r2": "The cue's part of R² as relative weight (Johnson 2000), a fast "
                              "approximation of the dominance weight, used beyond about 12 cues.",
        "gvif": "Generalized variance inflation factor of the cue (Fox & Monette 1992), which treats "
                "a categorical cue's dummy columns as one.",
        "method": "How the parts of R² were computed: 'dominance' (general dominance weights) or "
                  "'relative_weights' (Johnson's approximation).",
    },
    "retest": {
        "n_pairs": "Repeated cases of the rater in the phase, each giving one pair of first and second "
                   "judgments.",
        "r": "Test-retest correlation (-1 to 1) between first and second judgments of the repeated cases.",
        "r_ci_low": "Lower end of the Fisher-z 95% interval of the test-retest correlation.",
        "r_ci_high": "Upper end of the Fisher-z 95% interval of the test-retest correlation.",
        "icc_a1": "ICC(A,1) (up to 1) of the two occasions: absolute agreement between first and second "
                  "judgments, shifts in level counted as disagreement.",
        "mean_abs_diff": "Mean absolute difference between first and second judgments, in scale points.",
        "exact": "Share (0 to 1) of repeated cases judged exactly the same both times.",
        "within_one": "Share (0 to 1) of repeated cases whose two judgments differ by one scale point or less.",
        "kappa_quadratic": "Quadratically weighted kappa (up to 1) of first against second judgments "
                           "(Cohen 1968): agreement beyond chance, near misses counting partly.",
        "bias": "Mean of second minus first judgment, in scale points (Bland-Altman bias; positive: higher "
                "the second time).",
        "limit_low": "Lower Bland-Altman 95% limit of agreement: bias minus 1.96 SD of the differences, "
                     "in scale points.",
        "limit_high": "Upper Bland-Altman 95% limit of agreement: bias plus 1.96 SD of the differences, "
                      "in scale points.",
        "low_p": "Unadjusted one-sided p-value (Fisher z) of the test that the true retest correlation "
                 "is at least 0.70; the low_retest flag comes from it after adjustment.",
        "flag_detectable_below": "With this many repeated pairs, the largest observed retest r that "
                                 "could raise the low_retest flag (a small number of repeats can flag "
                                 "only very low correlations).",
        "measure": "Which figure r is: first_repeat_r (the first judgment of each repeated case against its "
                   "repeat) or mean_pairwise_r (with [judgment] repeats = \"all\": the mean r over every "
                   "pair of showings of each case).",
        "presentations": "Showings per case behind the figures (2 for a first judgment and its repeat; more "
                         "when every showing is used).",
        "presentation_pairs": "Pairs of showings per case averaged in mean_pairwise_r: k(k-1)/2 for k showings.",
        "r_ci_method": "How the interval of r was computed: Fisher z for one pair of showings, the F-based "
                       "interval of ICC(C,1) over every showing otherwise.",
        "icc_a1_ci_low": "Lower end of the 95% F-based interval of ICC(A,1) over the showings (McGraw & Wong 1996).",
        "icc_a1_ci_high": "Upper end of the 95% F-based interval of ICC(A,1) over the showings.",
        "icc_c1": "ICC(C,1) (up to 1) over the showings: consistency of the showings, shifts in level "
                  "between showings not counted as disagreement.",
        "icc_c1_ci_low": "Lower end of the 95% F-based interval of ICC(C,1) over the showings.",
        "icc_c1_ci_high": "Upper end of the 95% F-based interval of ICC(C,1) over the showings.",
        "low_test": "Which one-sided test gives low_p: Fisher z of r for one pair of showings, or the F test "
                    "of ICC(C,1) against 0.70 when every showing is used.",
    },
    "repeat_pairs": {
        "first": "The rater's first judgment of the repeated case (earliest by sequence, else by row order).",
        "second": "The rater's second judgment of the same case, the next presentation after the first.",
    },
    "chance_flags": {
        "flag": "The tested flag the row belongs to: curvature, cutoff_rule, drift, excluded_attribute "
                "or low_retest.",
        "test": "Which test of that flag: reset (curvature), step (cut-off rule), leniency or "
                "consistency (drift), the attribute's name (excluded attribute), fisher_z (low retest).",
        "p_panel": f"The test's p-value (0 to 1) {_HOLM_PHASE}.",
        "flagged": "True when p_panel is below 0.05, so the rater carries the flag for the phase.",
    },
    "reading_order": {
        "position": "Place of the judgment in the rater's own reading order within the phase, counted from 0.",
        "judgment": "The judgment the rater gave at that position, on the study's scale.",
    },
    "peer_agreement": {
        "n": "Cases the rater shares with at least one other reader in the phase.",
        "r": "Correlation (-1 to 1) between the rater's judgments and the mean of the other readers' "
             "judgments of the same cases.",
        "ci_low": "Lower end of the Fisher-z 95% interval of that correlation.",
        "ci_high": "Upper end of the Fisher-z 95% interval of that correlation.",
        "mean_gap": "Mean of the rater's judgment minus the other readers' mean on the shared cases, "
                    "in scale points (positive: more lenient).",
    },
    "severity": {
        "n": "Cases of the rater (first judgments) that enter the rater + case model of the phase.",
        "part": "Number (from 0) of the connected part of the rater-case network the rater belongs to; "
                "offsets are centred within each part and cannot be compared across parts.",
        "estimate": "Severity offset in scale points from the additive rater + case model (positive: "
                    "more lenient than the panel on the same cases; the offsets of a part average 0).",
        "se": "Heteroscedasticity-robust standard error of the offset (se_method names the form), in scale points.",
        "se_pooled": "Standard error of the offset from one pooled residual variance, in scale points, "
                     "for comparison with the robust one.",
        "ci_low": "Lower end of the 95% interval of the offset (robust standard error), in scale points.",
        "ci_high": "Upper end of the 95% interval of the offset (robust standard error), in scale points.",
        "own_sd": "Standard deviation of the rater's own judgments, in scale points.",
        "panel_sd": "Standard deviation of the other readers' severity-adjusted judgments of the same "
                    "cases, in scale points.",
        "sd_ratio": "own_sd divided by panel_sd: below 1 the rater uses less of the scale than the panel.",
        "middle_share": "Share (0 to 1) of the rater's judgments in the middle of the scale (the middle "
                        "category or two of an ordinal scale, the middle third of a continuous one).",
        "panel_middle_share": "Share (0 to 1) of the other readers' judgments of the same cases in the "
                              "middle of the scale, for comparison with middle_share.",
        "flags": "Level and range flags of the rater (lenient, severe, narrow_range, wide_range, "
                 "central_tendency), separated by spaces; empty when none.",
        "se_method": "Form of the heteroscedasticity-robust standard error used: HC2 (the default) or HC3.",
    },
    "files": {
        "n_readers": "Raters who judged the file in the phase (first judgments).",
        "raw_mean": "Plain mean of the file's judgments, in scale points; depends on who read it.",
        "adjusted": "The file's score after removing each reader's severity offset (its value in the "
                    "additive rater + case model), in scale points.",
        "se": "Standard error of the adjusted score: the panel's residual SD over the square root of "
              "the number of readers.",
        "spread_sd": "Standard deviation of the file's raw judgments across its readers, in scale points.",
        "spread_range": "Highest minus lowest raw judgment of the file, in scale points.",
        "disagreement_p": "p-value (0 to 1) of a chi-square screen: do the readers disagree more than the "
                          "panel's residual spread explains? Below 0.05 gives high_disagreement.",
        "part": "Number (from 0) of the connected part of the rater-case network the file belongs to; "
                "adjusted scores are comparable only within a part (-1: no reader).",
        "needs_another_read": "True when the file should be read again: one more reading has at least a "
                              "20% chance of changing its side of the cut-off, or its readers disagree "
                              "more than usual (reasons says which).",
        "reasons": "Why the file needs another read, separated by ';': may_change, high_disagreement; "
                   "empty when it does not.",
        "change_rank": "The file's place when the phase's files are ranked by the chance of changing side "
                       "with one more reading (1 = the most likely).",
        "change_probability": "Chance (0 to 1) that one more reader's severity-adjusted judgment moves the "
                              "file's adjusted mean across the cut-off; empty without a cut-off.",
        "near_cut_off": "True when the cut-off lies inside the file's 95% interval (kept for reference; "
                        "the list of files to read again uses change_probability).",
    },
    "group_pairs": {
        "rater_a": "The first rater of the pair (ids in sorted order, so each pair appears once).",
        "rater_b": "The other rater of the pair, after rater_a in sorted order.",
        "together": "Share (0 to 1) of the grouping's case resamples in which the two raters fell in "
                    "the same group: near 1, the pair is grouped together whatever the cases drawn.",
    },
    "notes": {
        "kind": "Stable code of the note's kind (a data rule such as later_presentations_dropped, or "
                "'analysis:first-words' for a note of an analysis); the reports group notes by it.",
        "message": "The note in full, as results.json holds it.",
        "file": "The input file the note concerns, where it concerns one (empty otherwise).",
        "row": "The row of that file, as a spreadsheet numbers it (the header is row 1), where known.",
    },
    "readers_per_file": {
        "raters": "Number of readers per file in the D-study scenario (1 to 10).",
        "g_rel": "Relative G coefficient (0 to 1): how dependably files would be ranked by the mean of "
                 "this many readers (generalizability theory, Brennan 2001).",
        "phi": "Phi coefficient (0 to 1): how dependable the mean of this many readers would be as an "
               "absolute level, reader severity counted as error.",
    },
    "agreement": {
        "form": "Short key of the ICC form: i1, a1, c1 (one rater) or ik, ak, ck (mean of the raters).",
        "label": "Published name of the ICC form, as in Shrout & Fleiss (1979) and McGraw & Wong (1996).",
        "k": "Number of raters whose mean the form describes (1 for single-rater forms).",
        "estimate": "The intraclass correlation (up to 1) of the form, from the variance components of "
                    "the crossed rater x case model.",
        "method": "How the estimate and its interval were obtained (the variance-components method and "
                  "the interval's bootstrap).",
    },
    "lens": {
        "n": "Cases of the rater with a known outcome (criterion), used in the lens model.",
        "r_a": "Achievement r_a (-1 to 1): correlation between the rater's judgments and the outcome.",
        "g": "Matching G (-1 to 1): correlation between the rater's policy and the environment's best "
             "linear rule for the outcome.",
        "c": "C (-1 to 1): correlation of what the two linear models leave over; knowledge beyond the cues "
             "that the rater shares with the outcome.",
        "r_e": "Environmental predictability R_e (0 to 1): how well the cues predict the outcome linearly.",
        "r_s": "Consistency R_s (0 to 1) on the cases with a known outcome.",
        "model_validity": "Correlation (-1 to 1) between the model of the rater (the rater's policy "
                          "applied to the cases) and the outcome.",
        "model_validity_cv": "The same with leave-one-out predictions (a fit that did not see the case).",
        "bootstrap_gain": "model_validity_cv minus r_a: how much better the model of the rater predicts "
                          "the outcome than the rater (judgment bootstrapping, Goldberg 1970).",
        "unit_weight_validity": "Correlation with the outcome of equal weights on the z-scored cues "
                                "(Dawes 1979), a yardstick for every rater.",
        "lme_error": "Absolute gap between r_a and the Lens Model Equation G R_e R_s + C ... (Tucker "
                     "1964); near 0 when the two fits are exact.",
        "summary": "The plain-English sentence the rater's report prints for the comparison of model and rater.",
        "r_a_ci_low": "Lower end of the BCa case-bootstrap 95% interval of r_a.",
        "r_a_ci_high": "Upper end of the BCa case-bootstrap 95% interval of r_a.",
        "g_ci_low": "Lower end of the BCa case-bootstrap 95% interval of G.",
        "g_ci_high": "Upper end of the BCa case-bootstrap 95% interval of G.",
        "c_ci_low": "Lower end of the BCa case-bootstrap 95% interval of C.",
        "c_ci_high": "Upper end of the BCa case-bootstrap 95% interval of C.",
        "r_e_ci_low": "Lower end of the BCa case-bootstrap 95% interval of R_e.",
        "r_e_ci_high": "Upper end of the BCa case-bootstrap 95% interval of R_e.",
        "interval_level": "Confidence level of the lens intervals (0.95).",
        "interval_method": "How the lens intervals were computed (case bootstrap with both models refitted, BCa).",
        "n_boot": "Bootstrap resamples behind the lens intervals.",
        "small_sample": "True when there are fewer than 10 cases with a known outcome per model term.",
        "small_sample_note": "The caution the reports print when small_sample is true; empty otherwise.",
        "model_vs_rater_verdict": "Which predicted the outcome better, decided on the interval: model_better, "
                                  "rater_better, about_same, neither_tracks or not_available.",
        "model_vs_rater_gain": "Leave-one-out model validity minus r_a (the difference the verdict is about).",
        "model_vs_rater_ci_low": "Lower end of the Zou (2007) 95% interval of that difference.",
        "model_vs_rater_ci_high": "Upper end of the Zou (2007) 95% interval of that difference.",
        "model_vs_rater_p_value": "Two-sided p-value (0 to 1) of Williams' T2 test of no difference "
                                  "(Steiger 1980).",
        "model_vs_rater_method": "The methods behind the model-against-rater comparison, with their sources.",
    },
    "alignment": {
        "share": "The cue's share (0 to 1) of the rater's policy on the rubric's basis; the shares of a "
                 "rater add up to 1.",
        "rubric_share": "The cue's intended share (0 to 1) from [rubric], normalised to add up to 1.",
        "misallocation": "Half the summed absolute differences between the rater's and the rubric's "
                         "shares (0: the rubric's weights, 1: none shared); the same on each of the rater's rows.",
        "g_rubric": "Correlation (-1 to 1) between the rater's policy and the rubric's policy over the "
                    "cases; the same on each of the rater's rows.",
    },
    "excluded": {
        "attribute": "The excluded attribute tested (a column named in [excluded]).",
        "n": "Cases in the test (first judgments with the attribute known).",
        "delta_r2": "Added R² (0 to 1) when the attribute joins the rater's policy.",
        "statistic": "The nested F statistic of that added R².",
        "df_num": "Numerator degrees of freedom of the F test (the attribute's terms).",
        "df_den": "Denominator degrees of freedom of the F test (cases minus terms of the larger model).",
        "test": "Which test was used: nested_f (least squares F test of the added terms).",
    },
    "cutoffs": {
        "n": "Cases in the rater's fit.",
        "cue": "The cue on which the best threshold rule was found.",
        "threshold": "The cue value of the best threshold rule, in the cue's unit: cases below it are "
                     "judged apart.",
        "n_below": "Cases of the rater below the threshold.",
        "step": "Shift of the judgments below the threshold beyond what the straight-line policy gives "
                "them, in scale points (negative: marked down below the cut).",
        "delta_r2": "Gain in R² (0 to 1) from adding the threshold step to the linear policy.",
        "statistic": "The gain as a share of the linear policy's residual sum of squares.",
        "p_value": "Parametric-bootstrap p-value (0 to 1) of the best threshold against purely linear "
                   "raters (the search over thresholds is accounted for).",
    },
    "drift": {
        "n": "Judgments of the rater in reading order in the phase.",
        "span": "Distance from the first to the last position of the reading order (positions or time units).",
        "slope": "Leniency drift: change of the judgments per position of the reading order, in scale "
                 "points, the cues held fixed.",
        "se": "Standard error of the leniency slope per position.",
        "slope_per_session": "Leniency drift over the whole session (slope times span), in scale points.",
        "ci_low": "Lower end of the 95% interval of the drift over the whole session.",
        "ci_high": "Upper end of the 95% interval of the drift over the whole session.",
        "p_value": "Unadjusted p-value (0 to 1) of the test of no leniency drift.",
        "consistency_slope": "Change per position of the size of the rater's departures from their own "
                             "policy (absolute residuals): positive means less consistent later.",
        "consistency_slope_per_session": "The same over the whole session (slope times span), in scale points.",
        "consistency_p_value": "Unadjusted p-value (0 to 1) of the test of no consistency drift.",
        "consistency_p_adjusted": f"p-value of the consistency drift test, {_HOLM_PHASE}.",
        "n_first_half": "Judgments in the first half of the reading order.",
        "n_second_half": "Judgments in the second half of the reading order.",
        "r_s_first_half": "Consistency R_s of the policy refitted on the first half of the reading order.",
        "r_s_second_half": "Consistency R_s of the policy refitted on the second half of the reading order.",
        "r_s_change": "Second-half R_s minus first-half R_s (negative: less consistent later).",
        "r_s_change_ci_low": "Lower end of the 95% interval of the change in R_s between the halves.",
        "r_s_change_ci_high": "Upper end of the 95% interval of the change in R_s between the halves.",
        "flagged": "True when either drift test's adjusted p-value is below 0.05 (the drift flag).",
        "reasons": "Which drift raised the flag: leniency, consistency, or both; empty when none.",
    },
    "rater_pairs": {
        "rater_a": "Id of one rater of the pair, as in the judgments table; mean_gap and r_s_a refer to this one.",
        "rater_b": "Id of the other rater of the pair, as in the judgments table; r_s_b refers to this one.",
        "n": "Cases both raters judged in the phase.",
        "r": "Correlation (-1 to 1) between the two raters' judgments of their shared cases.",
        "g": "Matching G (-1 to 1) between the two raters' policies fitted on the shared cases.",
        "c": "C (-1 to 1): correlation of what the two policies leave over (shared knowledge beyond the cues).",
        "r_s_a": "Consistency R_s of the first rater's policy on the shared cases.",
        "r_s_b": "Consistency R_s of the second rater's policy on the shared cases.",
        "mean_gap": "Mean of rater_a's minus rater_b's judgment on the shared cases, in scale points.",
        "loss_inconsistency": "Agreement lost to inconsistency, 1 - R_s_a R_s_b (part of 1 - r).",
        "loss_weighting": "Agreement lost to weighing the cues differently, R_s_a R_s_b (1 - G) (part of 1 - r).",
        "unmodelled": "Agreement from shared knowledge beyond the cues, C sqrt(1 - R_s_a²) sqrt(1 - R_s_b²); "
                      "1 - r = the two losses minus this.",
        "main_source": "The larger of the two losses: weighting (different weights) or inconsistency.",
        "dropped_terms": "Design columns left out of both policies of the pair because they are constant "
                         "on the shared cases (a JSON list; [] when none).",
    },
    "grouping": {
        "ward_group": "The rater's group in a cross-check: Ward clustering of the standardized weight "
                      "profiles (compare with the group column).",
    },
    "group_merges": {
        "step": "Order of the merge in the grouping tree, from 1 (first merge).",
        "merged_a": "Raters of the first of the two groups merged at this step, separated by commas.",
        "merged_b": "Raters of the second of the two groups merged at this step, separated by commas.",
        "n_groups": "Number of groups left after the merge.",
        "r2": "Overall R² of the panel's judgments, each group's raters sharing one policy, after the merge.",
        "r2_drop": "What the merge cost the whole panel's R² (descriptive; it shrinks as the panel grows).",
        "side_r2_loss": "R² the side that suffers most gives up by adopting the merged weights, as a share "
                        "of its own spread of judgments; the number-of-groups rule reads this one.",
        "f_statistic": "F of equal weights in the two merged groups (Chow 1960); descriptive only, as the "
                       "groups were formed to differ.",
        "df_num": "Numerator degrees of freedom of that F.",
        "df_den": "Denominator degrees of freedom of that F.",
        "p_value": "Parametric-bootstrap p-value (0 to 1) of the merge's side loss, adjusted over the "
                   "whole tree; empty when the chair chose the number of groups.",
    },
    "groups": {
        "term": "Design column (cue, or 'cue=level') of the group's pooled policy.",
        "measure": "What the estimate is: std_weight (standardized weight) or importance (share of R²).",
        "estimate": "The group's value of the measure for the term, from the group's shared policy (one "
                    "regression on the pooled judgments of its raters).",
    },
}


def column_description(table: str, column: str) -> str | None:
    """The sentence that describes ``column`` of ``table``, or None when there is none yet."""
    own = TABLE_COLUMN_NOTES.get(table, {})
    if column in own:
        return own[column]
    return COLUMN_NOTES.get(column)


__all__ = ["COLUMN_NOTES", "TABLE_COLUMN_NOTES", "column_description"]
