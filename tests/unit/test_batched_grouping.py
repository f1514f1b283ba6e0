"""Issue 17, groups / rater pairs / homogeneity: the batched paths equal per-rater references.

Each reference below is the code as it was before the batching (kept here, plain), run on
small panels: shared and incomplete designs, 1-7 and 0/1 judgments.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from calibrate.data.rows import line_up
from calibrate.panel.pairs import heterogeneity_wald, null_wald, policy_homogeneity
from calibrate.policy.linalg import grouped_sscp, ols_from_sscp
from tests.unit.grouping_panels import scale_panel


def _binary(first: pd.DataFrame) -> pd.DataFrame:
    """The same panel on a 0/1 scale (judgment 5 or above)."""
    return first.assign(judgment=(first["judgment"] >= 5).astype(float))


def _panels():
    design, first, _ = scale_panel(3, [9, 3], share_seen=1.0)          # shared design
    yield "shared 1-7", design, first
    design, first, _ = scale_panel(4, [8, 4], share_seen=0.7)          # incomplete design
    yield "incomplete 1-7", design, first
    yield "incomplete 0/1", design, _binary(first)


# --------------------------------------------------------------------------- homogeneity


@pytest.mark.parametrize("block", [1 << 18, 20])   # one block, and blocks of a few draws
def test_null_wald_equals_the_per_draw_wald_statistic(monkeypatch, block):
    import calibrate.panel.pairs as pairs

    monkeypatch.setattr(pairs, "_NULL_BLOCK_CELLS", block)
    rng = np.random.default_rng(0)
    B, K, p = 7, 9, 4
    z = rng.normal(size=(B, K, p))
    A = rng.normal(size=(K, p, p))
    factor = np.linalg.cholesky(A @ A.transpose(0, 2, 1) + np.eye(p))
    est = np.einsum("rij,brj->bri", factor, z)
    scale = rng.uniform(0.2, 3.0, size=(B, K))
    B_ = rng.normal(size=(K, p, p))
    precision = B_ @ B_.transpose(0, 2, 1) + np.eye(p)
    tests = [(None, precision), (np.array([1, 3]), precision[:, [1, 3]][:, :, [1, 3]]),
             (np.array([2]), precision[:, 2:3, 2:3]), (np.array([0]), precision[:, :1, :1])]
    batched = null_wald(z, factor, scale, tests)
    for (cols, P), T in zip(tests, batched):
        e = est if cols is None else est[:, :, cols]
        reference = heterogeneity_wald(e, P[None] * scale[:, :, None, None])
        np.testing.assert_allclose(T, reference, rtol=1e-9)


def _reference_homogeneity_draws(design, first, n_resamples, seed):
    """The bootstrap statistics T* of the old code: one (B, K, q, q) precision array."""
    rng = np.random.default_rng(seed)
    rows = line_up(design, first)
    p = design.matrix.shape[1]
    st = grouped_sscp(np.column_stack([rows.X, rows.y]), rows.group, rows.n_raters)
    fit = ols_from_sscp(st, np.arange(p), p)
    usable = fit.rank_ok & (fit.df_resid >= 2) & (fit.rss > 0)
    K = int(usable.sum())
    s2, f, M = fit.sigma2[usable], fit.df_resid[usable], fit.xtx_inv[usable]
    chol = np.linalg.cholesky(M)
    z = rng.standard_normal((n_resamples, K, p))
    b_star = np.sqrt(s2)[None, :, None] * np.einsum("rij,brj->bri", chol, z)
    s2_star = s2[None, :] * rng.chisquare(f[None, :].repeat(n_resamples, 0)) / f[None, :]
    b = fit.coef[usable]
    out = {}
    groups = [np.asarray(g, dtype=np.intp) for g in design.cue_groups() if g]
    names = [c for c, g in zip(design.cues, design.cue_groups()) if g]
    for cue, cols in [(None, np.arange(p))] + list(zip(names, groups)):
        M_inv = np.linalg.inv(M[:, cols[:, None], cols[None, :]])
        T = float(heterogeneity_wald(b[:, cols], M_inv / s2[:, None, None]))
        T_star = heterogeneity_wald(b_star[:, :, cols], M_inv[None] / s2_star[:, :, None, None])
        out[cue] = (T, (1.0 + np.count_nonzero(T_star >= T)) / (n_resamples + 1.0))
    return out


@pytest.mark.parametrize("which", ["shared 1-7", "incomplete 1-7", "incomplete 0/1"])
def test_homogeneity_p_values_equal_the_unbatched_bootstrap(which):
    design, first = next((d, f) for name, d, f in _panels() if name == which)
    result = policy_homogeneity(design, first, n_resamples=299, rng=11)
    reference = _reference_homogeneity_draws(design, first, 299, 11)
    for test in [result.overall, *result.per_cue]:
        T, p_value = reference[test.cue]
        assert test.statistic == pytest.approx(T, rel=1e-12)
        assert test.p_value == p_value


# --------------------------------------------------------------------------- joining pieces


def _reference_join_pieces(sscp, n, piece, rule, p):
    """The join of pieces before the batching: every pair rescored from three RSS fits
    and the side loss's three solves, the pick scanned over the live pairs."""
    from calibrate.panel.merges import merged_rss
    from calibrate.panel.stability import merge_side_loss

    piece = piece.copy()
    ids = [int(g) for g in np.unique(piece[piece >= 0])]
    P = len(ids)
    if P < 2:
        return piece
    group = np.array([sscp[piece == g].sum(axis=0) for g in ids])
    count = np.array([float(n[piece == g].sum()) for g in ids])
    size = np.array([np.sum(piece == g) for g in ids])
    cost = np.full((P, P), np.nan)
    allowed = np.zeros((P, P), dtype=bool)
    alive = np.ones(P, dtype=bool)

    def score(first, second):
        a, b = group[first], group[second]
        cost[first, second] = (merged_rss(a + b, count[first] + count[second], p)
                               - merged_rss(a, count[first], p) - merged_rss(b, count[second], p))
        allowed[first, second] = ~rule.apart(merge_side_loss(a, b, p),
                                             np.minimum(size[first], size[second]))

    score(*np.triu_indices(P, k=1))
    while alive.sum() > 1:
        live = np.flatnonzero(alive)
        first, second = np.triu_indices(live.size, k=1)
        first, second = live[first], live[second]
        ok = allowed[first, second]
        if not ok.any():
            break
        pick = int(np.flatnonzero(ok)[np.argmin(cost[first, second][ok])])
        keep, gone = int(first[pick]), int(second[pick])
        piece[piece == ids[gone]] = ids[keep]
        group[keep] = group[keep] + group[gone]
        count[keep] += count[gone]
        size[keep] += size[gone]
        alive[gone] = False
        others = np.flatnonzero(alive & (np.arange(P) != keep))
        if others.size:
            score(np.minimum(others, keep), np.maximum(others, keep))
    return piece


def _rater_sscp(design, first):
    first = first.sort_values(["rater", "case"], kind="stable")
    raters = sorted(first["rater"].unique())
    who = first["rater"].map({r: k for k, r in enumerate(raters)}).to_numpy()
    Z = np.column_stack([design.matrix[design.row_of(first["case"])], first["judgment"]])
    return Z, who, grouped_sscp(Z, who, len(raters))


def starting_pieces(which):
    """A small panel's per-rater SSCPs, its number of cues, a generator and three
    starting pieces: every rater alone, five pieces, eight with some raters left out."""
    design, first = next((d, f) for name, d, f in _panels() if name == which)
    _, _, full = _rater_sscp(design, first)
    R = full.n.size
    rng = np.random.default_rng(5)
    starts = (np.arange(R), rng.integers(0, 5, R),
              np.where(rng.random(R) < 0.2, -1, rng.integers(0, 8, R)))
    return full, design.n_columns, rng, starts


@pytest.mark.parametrize("which", ["shared 1-7", "incomplete 1-7", "incomplete 0/1"])
@pytest.mark.parametrize("threshold", [0.0, 0.02, 0.5])
def test_joining_pieces_equals_the_pairwise_scan(which, threshold):
    from calibrate.panel.stability import KeepApartRule, _join_pieces

    full, p, rng, starts = starting_pieces(which)
    for start in starts:
        rule = KeepApartRule(threshold, 0.05, np.array([0.05, 0.1]),
                             np.sort(rng.uniform(0.0, 3.0, 40)))
        np.testing.assert_array_equal(_join_pieces(full.sscp, full.n, start, rule, p),
                                      _reference_join_pieces(full.sscp, full.n, start, rule, p))


def test_joining_pieces_of_many_batches_at_once_equals_each_batch_alone():
    # The resamples' pieces are joined in lockstep, padded to the largest number of
    # pieces; every batch must come out as the pairwise scan gives it on its own
    # (batches with one piece, no pieces and many, raters left out of some).
    from calibrate.panel.stability import KeepApartRule, _join_pieces_lockstep

    design, first = next((d, f) for name, d, f in _panels() if name == "incomplete 1-7")
    Z, who, full = _rater_sscp(design, first)
    p = design.n_columns
    R = full.n.size
    rng = np.random.default_rng(8)
    starts = np.stack([np.arange(R), rng.integers(0, 5, R), np.zeros(R, dtype=int),
                       np.full(R, -1), np.where(rng.random(R) < 0.2, -1, rng.integers(0, 9, R))])
    for threshold in (0.0, 0.02):
        rule = KeepApartRule(threshold, 0.05, np.array([0.05, 0.1]),
                             np.sort(rng.uniform(0.0, 3.0, 40)))
        sscp = np.broadcast_to(full.sscp, (len(starts),) + full.sscp.shape)
        n = np.broadcast_to(full.n, (len(starts), R))
        together = _join_pieces_lockstep(sscp, n, starts, rule, p)
        for b, start in enumerate(starts):
            np.testing.assert_array_equal(
                together[b], _reference_join_pieces(full.sscp, full.n, start, rule, p))


# --------------------------------------------------------------------------- stability counts


def _reference_jaccard(slots, boot_slots, eligible):
    out = {}
    for s in sorted({int(x) for x in slots[eligible]}):
        member = slots == s
        scores = []
        for labels in boot_slots:
            here = labels >= 0
            target = member & here
            if not target.any():
                continue
            found = labels[:, None] == np.unique(labels[here])[None, :]
            inter = (found & target[:, None]).sum(axis=0)
            union = (found | target[:, None]).sum(axis=0)
            scores.append((inter / union).max())
        out[s] = float(np.mean(scores)) if scores else np.nan
    return out


def _reference_co_assignment(boot_slots):
    present = boot_slots >= 0
    same = (boot_slots[:, :, None] == boot_slots[:, None, :]) & present[:, :, None] \
        & present[:, None, :]
    both = (present[:, :, None] & present[:, None, :]).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(both > 0, same.sum(axis=0) / both, np.nan)


@pytest.mark.parametrize("n_labels", [2, 5, 40])
def test_jaccard_and_co_assignment_equal_the_resample_by_resample_counts(n_labels):
    from calibrate.panel.stability import co_assignment, group_jaccard

    rng = np.random.default_rng(n_labels)
    R, B = 30, 25
    slots = rng.integers(0, 4, R) * 3
    slots[[2, 7]] = -1
    eligible = slots >= 0
    boot = rng.integers(0, min(n_labels, R), (B, R))
    boot[rng.random((B, R)) < 0.1] = -1
    boot[:, 2] = boot[:, 7] = -1
    boot[3, slots == 3] = -1                      # a group absent from one resample
    assert group_jaccard(slots, boot, eligible) == _reference_jaccard(slots, boot, eligible)
    np.testing.assert_array_equal(co_assignment(boot), _reference_co_assignment(boot))
    many = np.tile(np.arange(R), (30, 1))         # every rater alone: the sparse count
    np.testing.assert_array_equal(co_assignment(many), _reference_co_assignment(many))


# --------------------------------------------------------------------------- merging


def test_recorded_runs_that_drop_dead_slots_make_the_same_merges(merge_engine):
    # The number-of-groups test and the resamples record their merges and drop dead
    # slots (compact=True); the merged pairs and their costs must be those of the run
    # that keeps every slot, the recorded RSS totals equal but for summation order.
    from calibrate.panel.merges import agglomerate
    from tests.unit.test_grouping_merges import resampled_panel

    n_raters, p = 45, 4
    sscp, n, active = resampled_panel(31, n_raters, p, count_seed=9, n_resamples=6)
    active[2, ::4] = False
    kept = agglomerate(sscp, n, active, p, stop_at=1, record=True, compact=False)
    dropped = agglomerate(sscp, n, active, p, stop_at=1, record=True, compact=True)
    assert len(kept.history) == len(dropped.history)
    for a, b in zip(kept.history, dropped.history):
        for x, y in zip(a[:4], b[:4]):          # batches, slots merged, cost
            np.testing.assert_array_equal(x, y)
        np.testing.assert_allclose(a[4], b[4], rtol=1e-12)   # RSS totals
        np.testing.assert_array_equal(a[5], b[5])
    np.testing.assert_array_equal(kept.labels, dropped.labels)


@pytest.mark.parametrize("which", ["shared 1-7", "incomplete 1-7", "incomplete 0/1"])
def test_grouping_of_a_panel_equals_the_grouping_without_dropped_slots(which, monkeypatch):
    # The whole grouping (its number-of-groups test and resamples included) with the
    # slot dropping of recorded runs switched off gives the same result, digit for digit
    # (36 raters: the pair-cost engine, its slots dropped more than once).
    import calibrate.panel.merges as merges
    from calibrate.panel.grouping import group_raters

    design, first, _ = scale_panel(6, [30, 6], share_seen=1.0 if which == "shared 1-7" else 0.7)
    if which.endswith("0/1"):
        first = _binary(first)
    fast = group_raters(design, first, rng=3, n_resamples=8, n_null=10)
    original = merges.agglomerate

    def keep_every_slot(*args, **kwargs):
        kwargs["compact"] = None
        return original(*args, **kwargs)

    monkeypatch.setattr("calibrate.panel.stability.agglomerate", keep_every_slot)
    plain = group_raters(design, first, rng=3, n_resamples=8, n_null=10)
    assert json.dumps(fast.to_dict()) == json.dumps(plain.to_dict())
    np.testing.assert_array_equal(fast.co_assignment, plain.co_assignment)


@pytest.mark.parametrize("which", ["shared 1-7", "incomplete 0/1"])
def test_simulated_panels_and_resamples_in_one_lockstep_equal_the_two_runs(which, merge_engine):
    # The grouping merges its simulated one-policy panels and its case resamples in one
    # call; the rule and every resample's groups must be those of the two separate runs
    # with the same draws (the simulated judgments first, then the case counts). 36
    # raters: the pair-cost engine.
    from calibrate.panel.stability import (
        keep_apart_rule,
        resample_counts,
        resampled_labels,
        rule_and_resampled_groups,
    )
    from calibrate.policy.linalg import ols_from_sscp

    design, first, _ = scale_panel(6, [30, 6], share_seen=1.0 if which == "shared 1-7" else 0.7)
    if which.endswith("0/1"):
        first = _binary(first)
    Z, who, full = _rater_sscp(design, first)
    p = design.n_columns
    case_row = design.row_of(first.sort_values(["rater", "case"], kind="stable")["case"])
    own = ols_from_sscp(full, np.arange(p), p)
    eligible = own.rank_ok & (full.sscp[:, p, p] > 0)
    n_cases = len(design.case_ids)
    rule, boot = rule_and_resampled_groups(Z, who, case_row, n_cases, eligible, own.rss,
                                           own.df_resid, p, 12, 7, np.random.default_rng(4),
                                           threshold=0.02, alpha=0.05, base=full)
    generator = np.random.default_rng(4)
    alone = keep_apart_rule(Z, who, eligible, own.rss, own.df_resid, p, 12, generator,
                            threshold=0.02, alpha=0.05, base=full)
    counts = resample_counts(generator, n_cases, 7)
    np.testing.assert_array_equal(rule.scale, alone.scale)
    np.testing.assert_array_equal(rule.null_max, alone.null_max)
    np.testing.assert_array_equal(boot, resampled_labels(Z, who, case_row, counts, eligible, p,
                                                         1, alone, base=full))
