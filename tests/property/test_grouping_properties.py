"""Property tests for calibrate.panel.grouping (hypothesis)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import adjusted_rand_score

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.panel.grouping import adjusted_rand_index, group_raters


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 4), st.integers(0, 3)), min_size=1, max_size=40))
def test_adjusted_rand_index_matches_scikit_learn(pairs):
    # Reference: scikit-learn's adjusted_rand_score (Hubert & Arabie 1985 formula),
    # an independent implementation.
    a, b = zip(*pairs)
    assert abs(adjusted_rand_index(a, b) - adjusted_rand_score(a, b)) < 1e-12


@settings(max_examples=15, deadline=None)
@given(st.integers(0, 10_000), st.floats(0.5, 20.0), st.floats(-50.0, 50.0))
def test_rater_names_and_affine_changes_do_not_change_the_grouping(seed, scale, shift):
    # Renaming raters (same sort order) and a positive affine change of every judgment
    # leave the merges, groups and R^2 figures unchanged (R^2 is scale-free).
    rng = np.random.default_rng(seed)
    cases = pd.DataFrame(rng.normal(size=(40, 3)), columns=["a", "b", "c"],
                         index=[f"k{i}" for i in range(40)])
    design = build_cue_design(cases, [CueRule(c) for c in cases.columns])
    weights = np.array([[1.0, 0.0, 0.5], [0.0, 1.0, 0.5]])
    rows = []
    for r in range(6):
        seen = np.flatnonzero(rng.random(40) < 0.8)
        y = design.matrix[seen] @ weights[r % 2] + rng.normal(0, 0.7, seen.size)
        rows += [(f"r{r}", design.case_ids[i], v) for i, v in zip(seen, y)]
    first = pd.DataFrame(rows, columns=["rater", "case", "judgment"])
    base = group_raters(design, first, rng=seed, n_resamples=0, n_null=30)
    moved = first.assign(rater="panel-" + first["rater"],
                         judgment=first["judgment"] * scale + shift)
    other = group_raters(design, moved, rng=seed, n_resamples=0, n_null=30)
    assert other.n_groups == base.n_groups
    assert [other.rater_group["panel-" + r] for r in base.raters] == \
        [base.rater_group[r] for r in base.raters]
    np.testing.assert_allclose([m.r2_drop for m in other.merges],
                               [m.r2_drop for m in base.merges], atol=1e-10)
