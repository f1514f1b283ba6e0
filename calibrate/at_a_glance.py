"""An audit at a glance, for a notebook: a few lines of text and one small HTML table.

``AuditResult.__repr__`` and ``_repr_html_`` call these. They read only the plain
dicts of the result (rater entries, panel entries), so they sit on the ground floor.
Every value a user typed (study, rater and phase names) is escaped in the HTML.
"""

from __future__ import annotations

import math
from collections import Counter
from html import escape


def _number(value, digits: int = 2) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    return f"{value:.{digits}f}"


def _phase_rows(raters, panels) -> list[dict]:
    """Per phase: raters, raters with a flag, the flags counted, and the panel's agreement."""
    rows = []
    for panel in panels:
        entries = [e for e in raters if e["phase"] == panel["phase"]]
        flags = Counter(f for e in entries for f in e["flags"])
        icc = panel.get("icc") or {}
        rows.append({"phase": panel["phase"], "raters": len(entries),
                     "flagged": sum(1 for e in entries if e["flags"]),
                     "flags": ", ".join(f"{name} {n}" for name, n in sorted(flags.items())) or "none",
                     "icc_a1": icc.get("a1"), "alpha": panel.get("alpha"),
                     "fleiss_kappa": panel.get("fleiss_kappa"), "gwet_ac1": panel.get("gwet_ac1")})
    return rows


def _agreement_text(row: dict) -> str:
    parts = [f"ICC(A,1) {_number(row['icc_a1'])}", f"alpha {_number(row['alpha'])}"]
    if row["fleiss_kappa"] is not None:
        parts += [f"Fleiss' kappa {_number(row['fleiss_kappa'])}", f"AC1 {_number(row['gwet_ac1'])}"]
    return ", ".join(parts)


def glance_text(result) -> str:
    """A few lines: the study, each phase's raters, flags and agreement, where the rest is."""
    lines = [f"AuditResult of {result.study_name!r} (seed {result.seed}): "
             f"{len(result.phases)} phase(s), {len(result.warnings)} data-quality note(s)"]
    for row in _phase_rows(result.raters, result.panels):
        lines.append(f"  phase {row['phase']}: {row['raters']} raters, {row['flagged']} flagged "
                     f"({row['flags']}); panel {_agreement_text(row)}")
    shown = ", ".join(list(result.tables)[:8]) + (", ..." if len(result.tables) > 8 else "")
    lines.append(f"  tables: {shown} -> result.table(name); everything: result.to_dict()")
    return "\n".join(lines)


def glance_html(result) -> str:
    """One table, a row per phase: raters, flagged raters and flags, panel agreement."""
    head = ("<tr><th>phase</th><th>raters</th><th>flagged</th><th>flags</th><th>ICC(A,1)</th>"
            "<th>alpha</th><th>Fleiss' kappa</th><th>AC1</th></tr>")
    body = "".join(
        f"<tr><td>{escape(str(r['phase']))}</td><td>{r['raters']}</td><td>{r['flagged']}</td>"
        f"<td>{escape(r['flags'])}</td><td>{_number(r['icc_a1'])}</td><td>{_number(r['alpha'])}</td>"
        f"<td>{_number(r['fleiss_kappa'])}</td><td>{_number(r['gwet_ac1'])}</td></tr>"
        for r in _phase_rows(result.raters, result.panels))
    caption = (f"Audit of {escape(result.study_name)} (seed {result.seed}); "
               f"{len(result.warnings)} data-quality note(s). Tables: result.table(name), "
               f"names in result.tables.")
    return f"<table><caption>{caption}</caption>{head}{body}</table>"
