"""How far the readers of the same files agree: ICC forms, Krippendorff's alpha, Fleiss' kappa
and Gwet's AC1,
each rater's agreement with the rest of the panel, severity, readers per file
(G- and D-study) and the per-file view."""

from .categories import CategoryAgreement, category_agreement, fleiss_kappa, gwet_ac1
from .files import FileRow, FileView, file_view
from .icc import (
    AgreementResult,
    AlphaEstimate,
    IccEstimate,
    icc_anova,
    krippendorff_alpha,
    panel_agreement,
    weighted_kappa,
)
from .readers import GStudyResult, VarianceComponents, generalizability, variance_components
from .offsets import RaterSeverity, SeverityResult, severity
from .with_panel import PeerAgreementSet, RaterPeerAgreement, agreement_with_panel

__all__ = [
    "AgreementResult",
    "AlphaEstimate",
    "CategoryAgreement",
    "FileRow",
    "FileView",
    "GStudyResult",
    "IccEstimate",
    "PeerAgreementSet",
    "RaterPeerAgreement",
    "RaterSeverity",
    "SeverityResult",
    "VarianceComponents",
    "agreement_with_panel",
    "category_agreement",
    "file_view",
    "fleiss_kappa",
    "generalizability",
    "gwet_ac1",
    "icc_anova",
    "krippendorff_alpha",
    "panel_agreement",
    "severity",
    "variance_components",
    "weighted_kappa",
]
