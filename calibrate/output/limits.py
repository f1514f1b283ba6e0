"""How large a panel one machine can audit: a memory estimate made before any analysis.

The model is linear in three terms, set from the peak resident memory of `calibrate audit
--no-pdf` on the invented panels of benchmarks/bench_scale.py (measured with
benchmarks/bench_memory.py --specs; the figures are in DEVELOPERS.md, "Limits"): a fixed
base (Python, numpy, pandas, the libraries), the judgment rows times the design terms (the
per-rater design blocks and their resamples), and the rater pairs (the per-pair
comparisons grow with the square of the panel).
"""

from __future__ import annotations

import os

# GB (binary: GiB, as /usr/bin/time and /proc/meminfo count) per term. Peaks measured
# 2026-12-04 on the bench_scale.py panels (200 cases per rater, 15% repeats, 8 cues: 8
# design terms), shared / linked design: 40 raters 0.36 / 0.39 GB, 400 raters 0.54 / 0.65,
# 2,000 raters 1.21 / 1.43 (DEVELOPERS.md, "Limits"; the compiled grouping keeps one
# raters x raters cost matrix at a time, where the numpy lockstep kept one per resample:
# 3.47 / 4.45 GB the day before). The three terms cannot tell the two designs apart (the
# same rows, raters and terms; the linked one has 100 times the cases), so the estimate
# covers both: the pair term is set to what the grouping's matrices need (three float
# matrices of raters x raters, about 5e-8 GB a pair, taken as 8e-8 for the rest that grows
# so), and base and row term by a linear programme keeping every estimate between its peak
# and 1.5 times it with the widest margin above the peaks. With the safety factor below
# the estimates are 1.15 to 1.50 times the six peaks.
BASE_GB = 0.49
GB_PER_ROW_TERM = 2.6e-7
GB_PER_RATER_PAIR = 8e-8
SAFETY = 1.05  # a peak varies from run to run by a few per cent

MACHINE_GB_FALLBACK = 24.0


def memory_terms(n_rows: int, n_raters: int, n_terms: int) -> list[float]:
    """The model's regressors: 1, rows x (terms + 1), rater pairs."""
    return [1.0, float(n_rows) * (n_terms + 1), n_raters * (n_raters - 1) / 2.0]


def estimated_gb(n_rows: int, n_raters: int, n_terms: int) -> float:
    """Peak memory (GB) the audit is expected to need, safety margin included."""
    base, per_row_term, per_pair = memory_terms(n_rows, n_raters, n_terms)
    return SAFETY * (BASE_GB * base + GB_PER_ROW_TERM * per_row_term + GB_PER_RATER_PAIR * per_pair)


def machine_gb() -> float:
    """This machine's memory in GB (from /proc/meminfo), or 24 GB when it cannot be read."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemTotal:"):
                    return int(line.split()[1]) / 1024 ** 2
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 1024 ** 3
    except (ValueError, OSError, AttributeError):
        return MACHINE_GB_FALLBACK


def table_size(table) -> tuple[int, int, int]:
    """(judgment rows, raters, design terms) of a JudgmentTable, over all phases."""
    rows = sum(len(ph.first) + len(ph.repeats) for ph in table.phases)
    raters = max((len(ph.raters) for ph in table.phases), default=0)
    return rows, raters, int(table.design.n_columns)


def memory_refusal(table, limit_gb: float | None) -> str | None:
    """The message refusing a panel whose estimate exceeds ``limit_gb`` (default: this
    machine's memory), or None when it fits."""
    rows, raters, terms = table_size(table)
    need = estimated_gb(rows, raters, terms)
    limit = machine_gb() if limit_gb is None else float(limit_gb)
    if need <= limit:
        return None
    return (f"this panel ({rows:,} judgment rows, {raters:,} raters, {terms} design terms) needs "
            f"about {need:.1f} GB of memory, more than the {limit:.1f} GB "
            f"{'allowed by --memory-limit' if limit_gb is not None else 'this machine has'}; "
            "the audit was not started. Audit the phases, or groups of raters, in separate "
            "studies; or, on a machine with more memory, give --memory-limit GB to run it anyway.")


# Output size, from the demo (3,222 rows: 1.3 MB of results, tables and workbook) and the
# rater reports (75-95 KB each, the CJK font subset included).
OUTPUT_BASE_BYTES = 1 << 20
OUTPUT_BYTES_PER_ROW = 400
PDF_BYTES_PER_RATER = 120_000


def estimated_output_bytes(n_rows: int, n_raters: int, pdf: bool) -> int:
    """Bytes the results folder is expected to take (rounded up generously)."""
    return OUTPUT_BASE_BYTES + OUTPUT_BYTES_PER_ROW * n_rows + (PDF_BYTES_PER_RATER * (n_raters + 1) if pdf else 0)


def free_bytes(folder) -> int | None:
    """Free bytes for an ordinary user in ``folder``'s file system, or None if unknown."""
    try:
        st = os.statvfs(folder)
    except (OSError, AttributeError):
        return None
    return st.f_bavail * st.f_frsize


def space_refusal(table, folder, shown, *, pdf: bool) -> str | None:
    """The message refusing an output place without room for the results, or None."""
    rows, raters, _terms = table_size(table)
    need = estimated_output_bytes(rows, raters, pdf)
    free = free_bytes(folder)
    if free is None or free >= need:
        return None
    return (f"the disk holding {shown} has {free / 1e6:.1f} MB free, and the results of this study "
            f"need about {need / 1e6:.1f} MB; the audit was not started. Free some space, or "
            "choose another --out" + (" (or add --no-pdf, which needs less)." if pdf else "."))
