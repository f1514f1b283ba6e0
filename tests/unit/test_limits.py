"""The stated limits: memory and disk estimates refuse a panel before the analysis starts."""

import subprocess
import sys

from calibrate.output.limits import estimated_gb, estimated_output_bytes, machine_gb, memory_terms
from tests.helpers import simple_judgments, write_study


def test_estimate_grows_with_rows_terms_and_pairs():
    small = estimated_gb(10_000, 100, 7)
    assert estimated_gb(100_000, 100, 7) > small and estimated_gb(10_000, 1_000, 7) > small
    assert estimated_gb(10_000, 100, 20) > small
    assert memory_terms(10, 3, 2) == [1.0, 30.0, 3.0]


def test_the_machine_memory_is_read():
    assert 0.5 < machine_gb() < 10_000


def test_output_estimate_counts_reports_only_with_pdfs():
    assert estimated_output_bytes(1000, 10, True) > estimated_output_bytes(1000, 10, False) > 1000 * 400


def test_a_panel_over_the_memory_limit_is_refused_before_the_analysis(tmp_path):
    spec = write_study(tmp_path / "s", simple_judgments(n_raters=3, n_cases=12))
    proc = subprocess.run([sys.executable, "-m", "calibrate", "audit", str(spec), "--out",
                           str(tmp_path / "o"), "--no-pdf", "--memory-limit", "0.01"],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr
    assert "GB of memory" in proc.stderr and "--memory-limit" in proc.stderr
    assert "Traceback" not in proc.stderr and "Audited" not in proc.stdout
    assert not (tmp_path / "o").exists()


# Peaks of `calibrate audit --no-pdf` measured 2026-12-04 (/usr/bin/time -v, GiB) on the
# benchmarks/bench_scale.py panels: (judgment rows, raters, design terms) -> peak.
MEASURED_PEAKS = {
    "shared 40": ((9_200, 40, 8), 0.36), "linked 40": ((9_200, 40, 8), 0.39),
    "shared 400": ((92_000, 400, 8), 0.54), "linked 400": ((92_000, 400, 8), 0.65),
    "shared 2,000": ((460_000, 2_000, 8), 1.21), "linked 2,000": ((460_000, 2_000, 8), 1.43),
}


def test_the_estimate_covers_every_measured_peak_within_half_again():
    for name, (size, peak) in MEASURED_PEAKS.items():
        assert peak <= estimated_gb(*size) <= 1.5 * peak, name
