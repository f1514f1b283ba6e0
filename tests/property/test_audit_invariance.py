"""Properties of the whole audit: row order (with a sequence column) and rater names do not
change the numbers; a positive affine change of the judgment scale leaves scale-free figures."""

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from calibrate.analyses import audit
from calibrate.data.ingest import load_study
from tests.helpers import write_study


def _panel(seed: int = 3, n_raters: int = 4, n_cases: int = 40) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x1, x2 = rng.normal(size=n_cases).round(3), rng.normal(size=n_cases).round(3)
    rows = []
    for r in range(n_raters):
        order = rng.permutation(n_cases)
        for pos, c in enumerate(order):
            y = 50 + 8 * x1[c] + (2 + r) * x2[c] + rng.normal(0, 4)
            rows.append({"rater": f"r{r + 1}", "case": f"c{c + 1}", "score": round(float(y), 3),
                         "x1": x1[c], "x2": x2[c], "seq": pos + 1})
        for pos, c in enumerate(order[:6]):  # hidden repeats at the end
            rows.append({"rater": f"r{r + 1}", "case": f"c{c + 1}",
                         "score": round(float(50 + 8 * x1[c] + rng.normal(0, 4)), 3),
                         "x1": x1[c], "x2": x2[c], "seq": n_cases + pos + 1})
    return pd.DataFrame(rows)


def _close(a, b) -> bool:
    """Equal up to floating-point rounding (summation order changes with names and order)."""
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_close(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_close(x, y) for x, y in zip(a, b))
    if isinstance(a, float) and isinstance(b, float):
        return bool(np.isclose(a, b, rtol=1e-9, atol=1e-12))
    return a == b


def _run(folder, df):
    path = write_study(folder, df, scale="continuous", jmin=0, jmax=1000,
                       extra_columns='sequence = "seq"')
    result = audit(load_study(path), n_boot=50)
    out = result.to_dict()
    out.pop("inputs")  # file hashes differ by construction
    return out


@settings(max_examples=3, deadline=None)
@given(st.integers(min_value=0, max_value=2**31 - 1))
def test_row_order_does_not_matter_when_a_sequence_exists(tmp_path_factory, shuffle_seed):
    df = _panel()
    base = _run(tmp_path_factory.mktemp("a"), df)
    shuffled = df.sample(frac=1.0, random_state=shuffle_seed % (2**32 - 1)).reset_index(drop=True)
    assert _close(_run(tmp_path_factory.mktemp("b"), shuffled), base)


def test_renaming_raters_permutes_nothing_but_names(tmp_path):
    df = _panel()
    base = _run(tmp_path / "a", df)
    names = {"r1": "zed", "r2": "amy", "r3": "kim", "r4": "bo"}
    renamed = _run(tmp_path / "b", df.assign(rater=df["rater"].map(names)))
    by_name = {(e["rater"], e["phase"]): e for e in renamed["raters"]}
    for entry in base["raters"]:
        other = dict(by_name[(names[entry["rater"]], entry["phase"])])
        other["rater"] = entry["rater"]
        for key in ("policy", "retest", "severity", "lens", "alignment", "flags"):
            assert _close(other[key], entry[key]), (entry["rater"], key)
        # drift's bootstrap interval for the R_s change draws per rater in name order; the
        # trend test itself is exact
        for key in ("slope", "p_value", "p_adjusted", "flagged"):
            assert _close(other["drift"][key], entry["drift"][key]), (entry["rater"], key)


def test_affine_change_of_the_scale_keeps_scale_free_figures(tmp_path):
    df = _panel()
    base = _run(tmp_path / "a", df)
    moved = _run(tmp_path / "b", df.assign(score=df["score"] * 2.0 + 10.0))
    for a, b in zip(base["raters"], moved["raters"]):
        assert np.isclose(a["policy"]["r"], b["policy"]["r"], rtol=1e-9)
        assert np.isclose(a["retest"]["r"], b["retest"]["r"], rtol=1e-9)
        for cue, w in a["policy"]["std_weights"].items():
            assert np.isclose(w, b["policy"]["std_weights"][cue], rtol=1e-9, atol=1e-12)
        assert np.isclose(2.0 * a["severity"]["offset"], b["severity"]["offset"], rtol=1e-9)
    for a, b in zip(base["panels"], moved["panels"]):
        for form, value in a["icc"].items():
            assert np.isclose(value, b["icc"][form], rtol=1e-9)
