"""Krippendorff (2011), "Computing Krippendorff's Alpha-Reliability": 4 coders x 12 units.

The data with missing values and the alphas (nominal .743, ordinal .815,
interval .849, ratio .797) as copied in the shared REFERENCE-DATA.md.
Unit 12 has one value and is not pairable.
"""

import numpy as np
import pandas as pd
import pytest

from calibrate.agreement.icc import krippendorff_alpha, panel_agreement

nan = np.nan
CODERS = np.array([
    [1, 2, 3, 3, 2, 1, 4, 1, 2, nan, nan, nan],
    [1, 2, 3, 3, 2, 2, 4, 1, 2, 5, nan, 3],
    [nan, 3, 3, 3, 2, 3, 4, 2, 2, 5, 1, nan],
    [1, 2, 3, 3, 2, 4, 4, 1, 2, 5, 1, nan],
])
PUBLISHED = {"nominal": 0.743, "ordinal": 0.815, "interval": 0.849, "ratio": 0.797}


@pytest.mark.parametrize("level", sorted(PUBLISHED))
def test_alpha_matches_published(level):
    units = np.tile(np.arange(12), 4)
    result = krippendorff_alpha(units, CODERS.ravel(), level=level)
    assert result.estimate == pytest.approx(PUBLISHED[level], abs=5e-4)
    assert result.n_cases == 11          # unit 12 is not pairable
    assert result.n == 40                # pairable values


@pytest.mark.parametrize("scale,level", [("ordinal", "ordinal"), ("binary", None)])
def test_panel_uses_the_scale_level(scale, level):
    rows = [(f"coder{a}", f"unit{u:02d}", CODERS[a, u])
            for a in range(4) for u in range(12) if np.isfinite(CODERS[a, u])]
    first = pd.DataFrame(rows, columns=["rater", "case", "judgment"])
    if scale == "binary":
        first["judgment"] = (first["judgment"] >= 3).astype(float)
        expected = krippendorff_alpha(first["case"], first["judgment"], level="nominal").estimate
    else:
        expected = PUBLISHED["ordinal"]
    result = panel_agreement(first, scale=scale, n_boot=200, rng=3)
    assert result.alpha.estimate == pytest.approx(expected, abs=5e-4)
    assert result.alpha.ci_low <= result.alpha.estimate <= result.alpha.ci_high


# Gwet's AC1 on the same data. Krippendorff prints no AC1, so the checks are identities:
# on the units read by all four coders (units 2-9; the other pairable ones, 1, 10 and 11,
# are read by three or two coders who all agree, where kappa = 1 and the identity is 0/0)
# AC1 from statsmodels' Fleiss and Randolph kappas (tests/category_identities.py), on the
# 1-5 values and split into "3 or more" against the rest; on all units, where one to four
# coders read a unit, the varying-readers rule of calibrate.agreement.categories written
# out a second way (agreeing coder pairs counted one by one), which checks the code
# against the rule, not the rule against a book.
FOUR_CODER_UNITS = list(range(1, 9))


@pytest.mark.parametrize("split", [False, True])
def test_ac1_on_units_with_equal_readers_matches_statsmodels_by_identity(split):
    from statsmodels.stats.inter_rater import aggregate_raters

    from calibrate.agreement.categories import category_counts, gwet_ac1
    from tests.category_identities import ac1_from_statsmodels

    read = np.isfinite(CODERS).sum(axis=0)
    assert [u for u in range(12) if read[u] == 4] == FOUR_CODER_UNITS
    values = CODERS[:, FOUR_CODER_UNITS].T                      # units x coders
    categories = [0, 1] if split else [1, 2, 3, 4, 5]
    if split:
        values = (values >= 3).astype(float)
    table, _ = aggregate_raters((values - categories[0]).astype(int), n_cat=len(categories))
    units = np.repeat(FOUR_CODER_UNITS, 4)                     # values.ravel() runs unit by unit
    counts, _ = category_counts(units, values.ravel(), categories=categories)
    assert np.array_equal(counts, table)
    assert gwet_ac1(counts) == pytest.approx(ac1_from_statsmodels(table), rel=0, abs=1e-12)


def test_ac1_on_all_units_follows_the_varying_readers_rule():
    from itertools import combinations

    from calibrate.agreement.categories import category_counts, gwet_ac1

    values = [CODERS[np.isfinite(CODERS[:, u]), u] for u in range(12)]
    # p_a: over the units with two or more coders, the share of agreeing coder pairs
    pair_shares = [np.mean([a == b for a, b in combinations(v, 2)]) for v in values if v.size >= 2]
    p_a = np.mean(pair_shares)
    # pi_k: over every unit with a value, the share of its coders who chose k
    pi = np.mean([[np.mean(v == k) for k in range(1, 6)] for v in values], axis=0)
    p_e = (pi * (1 - pi)).sum() / 4
    long = [(u, CODERS[a, u]) for u in range(12) for a in range(4) if np.isfinite(CODERS[a, u])]
    counts, _ = category_counts([u for u, _ in long], [v for _, v in long], categories=range(1, 6))
    assert len(pair_shares) == 11
    assert gwet_ac1(counts) == pytest.approx((p_a - p_e) / (1 - p_e), rel=0, abs=1e-12)
