"""Tests for the merge engine of the policy grouping (calibrate.panel.merges).

The engine keeps each row's cheapest merge and computes a pair's cost exactly only
when a lower bound cannot rule it out. These tests hold it to a straightforward
greedy written here (every pair refitted from raw rows at every step), check the
bound against exact costs, and check that pruning changes no digit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.panel import merges as grouping_merges
from calibrate.panel.grouping import group_raters
from calibrate.panel.merges import _PairCosts, agglomerate, batched_rss, stacked_sscp
from calibrate.policy.linalg import grouped_sscp


def numpy_engine(monkeypatch):
    """Keep the panel on the numpy engines, whatever its size (tests of their digits)."""
    monkeypatch.setattr(grouping_merges, "_COMPILED_PANEL", 10**9)


def random_panel(seed, n_raters, n_cases, p, *, n_policies=3, share_seen=0.7):
    """Raw rows of an invented panel: cues Z[:, :p], judgment Z[:, p], rater index ``who``."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n_cases, p))
    X[:, -1] = (X[:, -1] > 0.3).astype(float)  # a dummy-like cue, as categorical cues give
    policies = rng.normal(size=(n_policies, p))
    seen = rng.random((n_raters, n_cases)) < share_seen
    seen[:, : p + 3] = True  # every rater can be fitted
    who, case = np.nonzero(seen)
    y = np.einsum("mp,mp->m", X[case], policies[who % n_policies])
    y += rng.normal(0.0, rng.uniform(0.3, 1.5), y.size) + rng.normal(0.0, 1.0, n_raters)[who]
    return np.column_stack([X[case], y]), who, case



def resampled_panel(seed, n_raters, p, *, count_seed, n_resamples, n_cases=150):
    """Case resamples of a :func:`random_panel` (half the cases seen by each rater):
    their stacked SSCPs, counts and the raters each can fit (enough cases, finite RSS)."""
    Z, who, case = random_panel(seed, n_raters, n_cases, p, share_seen=0.5)
    rng = np.random.default_rng(count_seed)
    counts = rng.multinomial(n_cases, np.full(n_cases, 1.0 / n_cases), size=n_resamples).astype(float)
    sscp, n = stacked_sscp(Z, who, n_raters, weights=counts[:, case])
    return sscp, n, np.isfinite(batched_rss(sscp, n, p)) & (n > p + 1)

def reference_greedy(Z, who, raters, p, weights=None):
    """Plain greedy grouping: at every step refit every pair of groups from raw rows.

    A group's RSS is that of one least-squares equation on its raters' rows, each
    rater's rows centred at that rater's own (weighted) means (shared weights, an
    intercept per rater). Returns [(members_a, members_b, cost)] in merge order, and
    the smallest gap between the best and second-best cost met on the way.
    """
    w = np.ones(len(Z)) if weights is None else weights
    rss_of = {}

    def rss(members):
        if members not in rss_of:
            blocks = []
            for r in members:
                rows = (who == r) & (w > 0)
                wr = w[rows][:, None]
                centred = Z[rows] - (wr * Z[rows]).sum(axis=0) / wr.sum()
                blocks.append(centred * np.sqrt(wr))
            stacked = np.vstack(blocks)
            _, residual, *_ = np.linalg.lstsq(stacked[:, :p], stacked[:, p], rcond=None)
            rss_of[members] = float(residual[0])
        return rss_of[members]

    groups = [frozenset([r]) for r in raters]
    merges, smallest_gap = [], np.inf
    while len(groups) > 1:
        costs = sorted((rss(a | b) - rss(a) - rss(b), k, m)
                       for k, a in enumerate(groups) for m, b in enumerate(groups) if k < m)
        if len(costs) > 1:
            smallest_gap = min(smallest_gap, costs[1][0] - costs[0][0])
        cost, k, m = costs[0]
        merges.append((groups[k], groups[m], cost))
        groups = [g for n, g in enumerate(groups) if n not in (k, m)] + [groups[k] | groups[m]]
    return merges, smallest_gap


def engine_merges(history, labels_start, batch):
    """The merges of one batch of :func:`agglomerate` as (members_a, members_b, cost)."""
    labels = labels_start.copy()
    out = []
    for todo, i, j, cost, *_ in history:
        hit = np.flatnonzero(todo == batch)
        if not hit.size:
            continue
        a, b, c = int(i[hit[0]]), int(j[hit[0]]), float(cost[hit[0]])
        out.append((frozenset(np.flatnonzero(labels == a).tolist()),
                    frozenset(np.flatnonzero(labels == b).tolist()), c))
        labels = np.where(labels == b, a, labels)
    return out


def assert_same_merges(engine, reference, gap, scale):
    assert gap > 1e-8 * scale  # no near-tie that rounding could settle either way
    assert len(engine) == len(reference)
    for (ea, eb, ec), (ra, rb, rc) in zip(engine, reference):
        assert {ea, eb} == {ra, rb}
        assert ec == pytest.approx(rc, abs=1e-9 * scale)


@pytest.mark.parametrize("seed, n_raters, n_cases, p", [
    (1, 9, 40, 3), (2, 14, 60, 4), (3, 20, 50, 5), (4, 26, 80, 3),
])
def test_merge_sequence_matches_a_straightforward_greedy(seed, n_raters, n_cases, p, merge_engine):
    # Reference: the greedy above, refitting every pair from raw rows at every step
    # (numpy lstsq; Ward 1963 error sum of squares criterion on rater policies).
    Z, who, _ = random_panel(seed, n_raters, n_cases, p)
    stats = grouped_sscp(Z, who, n_raters)
    active = np.ones((1, n_raters), bool)
    agg = agglomerate(stats.sscp[None], stats.n[None], active, p, stop_at=1, record=True)
    reference, gap = reference_greedy(Z, who, range(n_raters), p)
    scale = float(stats.sscp[:, p, p].sum())
    assert_same_merges(engine_merges(agg.history, np.arange(n_raters), 0), reference, gap, scale)


def test_lockstep_batches_each_match_the_straightforward_greedy(merge_engine):
    # Several groupings at once, as the stability check runs them: case resamples
    # (count weights) with some raters sitting out, each batch held to the greedy on
    # its own weighted rows.
    n_raters, n_cases, p = 12, 45, 3
    Z, who, case = random_panel(7, n_raters, n_cases, p)
    rng = np.random.default_rng(70)
    counts = rng.multinomial(n_cases, np.full(n_cases, 1.0 / n_cases), size=4).astype(float)
    sscp, n = stacked_sscp(Z, who, n_raters, weights=counts[:, case])
    active = np.isfinite(batched_rss(sscp, n, p)) & (n > p + 1)
    active[1, [2, 5]] = False
    active[3, 0] = False
    agg = agglomerate(sscp, n, active, p, stop_at=1, record=True)
    for b in range(len(counts)):
        start = np.where(active[b], np.arange(n_raters), -1)
        reference, gap = reference_greedy(Z, who, np.flatnonzero(active[b]), p,
                                          weights=counts[b, case])
        scale = float(sscp[b, active[b], p, p].sum())
        assert_same_merges(engine_merges(agg.history, start, b), reference, gap, scale)


def test_stopping_early_gives_the_first_merges_and_the_last_cost(merge_engine):
    Z, who, _ = random_panel(5, 15, 60, 4)
    stats = grouped_sscp(Z, who, 15)
    active = np.ones((1, 15), bool)
    full = agglomerate(stats.sscp[None], stats.n[None], active, 4, stop_at=1, record=True)
    part = agglomerate(stats.sscp[None], stats.n[None], active, 4, stop_at=4, record=True)
    assert len(part.history) == 11
    for a, b in zip(part.history, full.history):
        assert (a[1] == b[1]).all() and (a[2] == b[2]).all() and (a[3] == b[3]).all()
    assert part.last_cost[0] == full.history[10][3][0]


def test_unrecorded_runs_drop_dead_slots_and_end_alike(merge_engine):
    # Without a record the engine drops dead groups' slots as it goes (40 raters, so
    # the slots are compacted several times); labels and last costs must not change.
    n_raters, p = 40, 4
    sscp, n, active = resampled_panel(21, n_raters, p, count_seed=8, n_resamples=5)
    active[0, ::3] = False  # batches of unequal size: the smaller ones get padded
    for stop_at in (1, 3, 9):
        kept = agglomerate(sscp, n, active, p, stop_at=stop_at, record=True)
        compacted = agglomerate(sscp, n, active, p, stop_at=stop_at, record=False)
        assert (kept.labels == compacted.labels).all()
        assert np.array_equal(kept.last_cost, compacted.last_cost)
        if stop_at == 1:
            assert len(np.unique(compacted.labels[1])) == 1


def test_reused_work_memory_leaves_no_trace(monkeypatch):
    # The pair-cost matrices are kept between groupings; a grouping run after a bigger
    # one (whose numbers still fill that memory) must come out as it did before it,
    # and group_raters hands the memory back when it is done.
    def run(seed, n_raters, record):
        Z, who, _ = random_panel(seed, n_raters, 120, 4, share_seen=0.6)
        noise = np.random.default_rng(seed).normal(size=(3, len(Z)))
        sims, n = stacked_sscp(Z, who, n_raters, judgments=Z[:, 4] + noise)
        active = np.ones((3, n_raters), bool)
        return agglomerate(sims, n, active, 4, stop_at=2, record=record)

    numpy_engine(monkeypatch)  # the compiled engine keeps no memory between groupings
    grouping_merges.release_work_memory()
    before = run(1, 36, record=False)
    run(2, 70, record=False)
    run(3, 50, record=True)
    after = run(1, 36, record=False)
    assert (before.labels == after.labels).all()
    assert np.array_equal(before.last_cost, after.last_cost)
    assert grouping_merges._SPARE  # kept for the next grouping
    cases = pd.DataFrame(np.random.default_rng(0).normal(size=(5, 2)), columns=["a", "b"],
                         index=[f"k{i}" for i in range(5)])
    design = build_cue_design(cases, [CueRule("a"), CueRule("b")])
    first = pd.DataFrame({"rater": ["r1"] * 5 + ["r2"] * 5, "case": list(cases.index) * 2,
                          "judgment": np.arange(10.0) % 4})
    group_raters(design, first, rng=0, n_resamples=0)
    assert not grouping_merges._SPARE


def test_pruning_changes_no_digit_and_skips_most_pairs(monkeypatch):
    # Same merges and the same digits with and without the bound, and with the plain
    # engine of small panels; with the bound, most pair costs of a 120-rater panel
    # are never computed (measured: about 4% computed).
    n_raters, p = 120, 5
    Z, who, _ = random_panel(11, n_raters, 400, p, n_policies=4, share_seen=0.3)
    stats = grouped_sscp(Z, who, n_raters)
    rng = np.random.default_rng(3)
    noise = rng.normal(size=(3, len(Z)))
    sims, n = stacked_sscp(Z, who, n_raters, judgments=Z[:, p] + noise)
    sscp = np.concatenate([stats.sscp[None], sims])
    counts = np.concatenate([stats.n[None], n])
    active = np.ones((4, n_raters), bool)
    active[2, :7] = False
    numpy_engine(monkeypatch)
    fast = agglomerate(sscp, counts, active, p, stop_at=1, record=True)
    every = agglomerate(sscp, counts, active, p, stop_at=1, record=True, prune=False)
    monkeypatch.setattr(grouping_merges, "_SMALL_PANEL", 10_000)
    plain = agglomerate(sscp, counts, active, p, stop_at=1, record=True)
    for other in (every, plain):
        assert len(fast.history) == len(other.history)
        for a, b in zip(fast.history, other.history):
            for x, y in zip(a, b):
                assert np.array_equal(x, y)
        assert (fast.labels == other.labels).all()
    assert every.n_exact == plain.n_exact
    every_pair = every.n_exact
    assert every_pair >= 4 * n_raters * (n_raters - 1) // 2 - 7 * n_raters
    assert fast.n_exact < 0.2 * every_pair


def test_lower_bound_never_exceeds_the_exact_cost():
    # The bound rests on cost = d'(A^-1 + B^-1)^-1 d (Chow 1960, Econometrica
    # 28:591-605, the numerator of the test of equal slopes); checked here as an exact
    # identity, then bound <= exact cost over every pair, including nearly collinear
    # cues and very unequal group sizes.
    rng = np.random.default_rng(9)
    p, R = 4, 30
    rows = []
    for r in range(R):
        m = int(rng.integers(p + 3, 80))
        X = rng.normal(size=(m, p))
        if r % 3 == 0:
            X[:, 1] = X[:, 0] + rng.normal(0, 1e-3, m)  # nearly collinear
        X *= rng.uniform(0.1, 10.0, p)
        y = X @ rng.normal(size=p) + rng.normal(0, 0.5, m)
        rows.append(np.column_stack([X, y]))
    Z = np.vstack(rows)
    who = np.repeat(np.arange(R), [len(x) for x in rows])
    stats = grouped_sscp(Z, who, R)
    sscp, n = stats.sscp[None].copy(), stats.n[None].copy()
    active = np.ones((1, R), bool)
    rss = batched_rss(sscp, n, p)
    costs = _PairCosts(sscp, n, rss, active, p, prune=True)
    bounds = costs.all_pair_bounds(slice(0, 1), out=np.empty((1, R, R)))[0]
    worst_identity, worst_slack = 0.0, np.inf
    for a in range(R):
        for b in range(a + 1, R):
            A, B = sscp[0, a, :p, :p], sscp[0, b, :p, :p]
            d = np.linalg.solve(A, sscp[0, a, :p, p]) - np.linalg.solve(B, sscp[0, b, :p, p])
            chow = d @ np.linalg.solve(np.linalg.inv(A) + np.linalg.inv(B), d)
            merged = sscp[0, a] + sscp[0, b]
            exact = batched_rss(merged[None], n[0, a] + n[0, b], p)[0] - rss[0, a] - rss[0, b]
            worst_identity = max(worst_identity, abs(exact - chow) / (1.0 + abs(chow)))
            worst_slack = min(worst_slack, exact - bounds[a, b])
    assert worst_identity < 1e-7
    assert worst_slack >= 0.0
