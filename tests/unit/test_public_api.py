"""The public API is pinned: a name added or removed here is a decision, not an accident."""

import subprocess
import sys

import calibrate

TOP = ["AuditResult", "CalibrateError", "ComparisonResult", "__version__", "audit", "compare", "load_study",
       "read_spec", "write_audit", "write_comparison"]

SUBPACKAGES = {
    "data": ["CueDesign", "CueRule", "DataSource", "DataSummary", "JudgmentRows", "JudgmentScale",
             "JudgmentTable", "PhaseData", "PhaseSummary", "RaterLookup", "StudySpec", "build_cue_design",
             "build_demo", "draft_spec", "format_summary", "inspect_study", "line_up", "load_study",
             "parse_spec", "read_spec", "read_table", "summarize", "write_demo", "write_spec"],
    "policy": ["BatchedLogistic", "BatchedOLS", "CaseToReview", "GroupedSSCP", "LogisticPolicy",
               "PolicyIntervals", "PolicySet", "RaterPolicy", "ResetTest", "bca_interval",
               "captured_policies", "case_bootstrap_intervals", "condition_number", "cue_importance",
               "dominance_weights", "fit_logistic", "fit_policies", "grouped_sscp", "importance_shares",
               "ols_from_sscp", "relative_weights", "reset_test", "variance_inflation"],
    "consistency": ["ConsistencyVerdict", "DriftResult", "RaterDrift", "RaterRetest", "RetestSet",
                    "consistency_verdict", "drift", "retest"],
    "agreement": ["AgreementResult", "AlphaEstimate", "CategoryAgreement", "FileRow", "FileView", "GStudyResult",
                  "IccEstimate", "PeerAgreementSet", "RaterPeerAgreement", "RaterSeverity", "SeverityResult",
                  "VarianceComponents", "agreement_with_panel", "category_agreement", "file_view",
                  "fleiss_kappa", "generalizability", "gwet_ac1", "icc_anova",
                  "krippendorff_alpha", "panel_agreement", "severity", "variance_components",
                  "weighted_kappa"],
    "lens": ["AlignmentResult", "CutoffResult", "EnvironmentModel", "ExcludedResult", "LensResult",
             "RaterAlignment", "RaterCutoff", "RaterExcluded", "RaterLens", "cutoff_check", "excluded_check",
             "lens_model", "rubric_alignment"],
    "panel": ["RaterPairsResult", "GroupPolicy", "GroupingResult", "HomogeneityResult", "MergeStep",
              "RaterPair", "adjusted_rand_index", "group_raters", "compare_rater_pairs",
              "policy_homogeneity"],
    "output": ["OutputFolder", "PseudonymKey", "TABLE_DESCRIPTIONS", "comparison_schema", "csv_bytes",
               "default_key_path", "pseudonymise_table", "results_schema", "sheet_names", "workbook_bytes"],
    "report": ["build_reports", "load_report_input", "panel_pdf", "rater_file_names", "rater_pdf"],
    "training": ["COMPARISON_SCHEMA", "Change", "ComparisonResult", "RaterComparison", "ancova_difference",
                 "bootstrap_difference", "compare", "fisher_z_difference", "normal_difference",
                 "paired_tests", "phase_pairs", "welch_difference"],
    "design": ["PANEL", "CollectedPackets", "RatingPlan", "ScoredFiles", "collect_packets", "load_policies",
               "plan_exercise", "score_files", "write_collected", "write_plan"],
}


def test_top_level_names_are_pinned_and_resolve():
    assert sorted(calibrate.__all__) == sorted(TOP)
    for name in TOP:
        assert getattr(calibrate, name) is not None
    assert callable(calibrate.audit) and callable(calibrate.load_study) and callable(calibrate.write_audit)


def test_subpackage_exports_are_pinned():
    import importlib

    for package, names in SUBPACKAGES.items():
        module = importlib.import_module(f"calibrate.{package}")
        assert sorted(module.__all__) == sorted(names), package
        for name in names:
            assert hasattr(module, name), f"calibrate.{package}.{name}"


def test_import_calibrate_loads_no_statistics():
    code = "import sys, calibrate; print(sorted(m for m in ('numpy', 'pandas', 'scipy') if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
