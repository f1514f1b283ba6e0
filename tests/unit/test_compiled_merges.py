"""The compiled merge engine (calibrate.panel.compiled_merges) against the numpy one.

Both run the same greedy with the same bound, tie rule and subtraction order; only the
small solves differ (a written-out Cholesky against LAPACK's LU), so the merges must be
the same pairs in the same order and the costs and RSS totals equal to rounding.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from calibrate.panel import merges
from calibrate.panel.stability import KeepApartRule
from calibrate.policy.linalg import grouped_sscp
from tests.helpers import printed_words
from tests.unit.test_grouping_merges import random_panel, resampled_panel

pytest.importorskip("numba")

#: Costs and totals agree to this relative difference; a cost near zero (exact
#: duplicates) to 1e-12 of the panel's total sum of squares of judgments.
RELATIVE = 1e-9


def run(engine, monkeypatch, *args, **kwargs):
    with monkeypatch.context() as patch:
        patch.setattr(merges, "_COMPILED_PANEL", 0 if engine == "compiled" else 10**9)
        return merges.agglomerate(*args, **kwargs)


def assert_same_merges(compiled, plain, scale):
    assert len(compiled.history) == len(plain.history)
    for step, (ours, theirs) in enumerate(zip(compiled.history, plain.history)):
        for k in (0, 1, 2, 5):  # batches, slot kept, slot absorbed, groups before
            np.testing.assert_array_equal(ours[k], theirs[k], err_msg=f"step {step}")
            assert ours[k].dtype == theirs[k].dtype
        for k in (3, 4):  # cost, RSS total
            np.testing.assert_allclose(ours[k], theirs[k], rtol=RELATIVE, atol=1e-12 * scale,
                                       err_msg=f"step {step}")
    np.testing.assert_array_equal(compiled.labels, plain.labels)
    np.testing.assert_allclose(compiled.last_cost, plain.last_cost, rtol=RELATIVE,
                               atol=1e-12 * scale)
    np.testing.assert_array_equal(compiled.tss, plain.tss)


@pytest.mark.parametrize("seed, n_raters, p, n_resamples", [
    (1, 24, 3, 3), (2, 40, 4, 5), (3, 65, 5, 4), (4, 90, 6, 2),
    (5, 30, 1, 3), (6, 30, 2, 2), (7, 40, 12, 2),  # one cue, two, many
])
@pytest.mark.parametrize("stop_at, record, compact", [
    (1, True, False), (1, True, True), (3, True, None), (1, False, None), (5, False, None),
])
def test_compiled_engine_makes_the_numpy_engines_merges(seed, n_raters, p, n_resamples,
                                                        stop_at, record, compact, monkeypatch):
    # Case resamples in lockstep, batches of different sizes (raters sitting out some).
    sscp, n, active = resampled_panel(seed, n_raters, p, count_seed=seed + 50,
                                      n_resamples=n_resamples)
    active[0, ::3] = False
    if n_resamples > 2:
        active[2, : n_raters // 2] = False
    options = dict(stop_at=stop_at, record=record, compact=compact)
    plain = run("numpy", monkeypatch, sscp, n, active, p, **options)
    compiled = run("compiled", monkeypatch, sscp, n, active, p, **options)
    assert bool(compiled.history) == record
    assert_same_merges(compiled, plain, float(sscp[..., p, p][active].sum()))


def test_simulated_panels_and_a_panel_too_small_to_merge(monkeypatch):
    # Simulated judgments for the same raters (the number-of-groups test), plus a batch
    # with a single active rater (no merge: last cost NaN) and one with none.
    n_raters, p = 50, 4
    Z, who, _ = random_panel(8, n_raters, 120, p, share_seen=0.6)
    noise = np.random.default_rng(8).normal(size=(4, len(Z)))
    sims, n = merges.stacked_sscp(Z, who, n_raters, judgments=Z[:, p] + noise)
    active = np.ones((4, n_raters), bool)
    active[1] = False
    active[1, 7] = True
    active[3] = False
    plain = run("numpy", monkeypatch, sims, n, active, p, stop_at=1, record=True)
    compiled = run("compiled", monkeypatch, sims, n, active, p, stop_at=1, record=True)
    assert np.isnan(compiled.last_cost[[1, 3]]).all()
    assert_same_merges(compiled, plain, float(sims[..., p, p][active].sum()))


def test_exact_ties_go_to_the_lowest_pair_in_both_engines(monkeypatch):
    # Raters 3, 11 and 20 are one rater three times over: their three pair costs are the
    # same number, so the first merge must be the lowest pair, (3, 11), then 20 joins.
    n_raters, p = 30, 4
    Z, who, _ = random_panel(12, n_raters, 90, p)
    stats = grouped_sscp(Z, who, n_raters)
    sscp, n = stats.sscp[None].copy(), stats.n[None].copy()
    sscp[0, [11, 20]] = sscp[0, 3]
    n[0, [11, 20]] = n[0, 3]
    active = np.ones((1, n_raters), bool)
    plain = run("numpy", monkeypatch, sscp, n, active, p, stop_at=1, record=True)
    compiled = run("compiled", monkeypatch, sscp, n, active, p, stop_at=1, record=True)
    assert (int(compiled.history[0][1][0]), int(compiled.history[0][2][0])) == (3, 11)
    assert (int(compiled.history[1][1][0]), int(compiled.history[1][2][0])) == (3, 20)
    assert_same_merges(compiled, plain, float(sscp[0, :, p, p].sum()))


def test_the_engine_is_picked_by_panel_size_and_numba_loads_only_then():
    # Below the threshold the numpy engine runs and numba is never imported; at it the
    # compiled engine runs (its first call loads numba).
    code = (
        "import sys, numpy as np\n"
        "from calibrate.panel import merges\n"
        "from tests.unit.test_grouping_merges import resampled_panel\n"
        "R = merges._COMPILED_PANEL\n"
        "for size in (R - 1, R):\n"
        "    sscp, n, active = resampled_panel(5, size, 3, count_seed=6, n_resamples=1)\n"
        "    merges.agglomerate(sscp, n, active, 3, stop_at=1, record=False)\n"
        "    print('numba' in sys.modules, flush=True)\n"
    )
    assert printed_words(code) == ["False", "True"]


def test_group_raters_gives_the_same_groups_with_either_engine(monkeypatch):
    from calibrate.panel.grouping import group_raters
    from tests.unit.grouping_panels import scale_panel

    design, first, _ = scale_panel(6, [30, 6], share_seen=0.7)
    results = {}
    for engine in ("numpy", "compiled"):
        with monkeypatch.context() as patch:
            patch.setattr(merges, "_COMPILED_PANEL", 0 if engine == "compiled" else 10**9)
            results[engine] = group_raters(design, first, rng=3, n_resamples=8, n_null=10)
    plain, compiled = (json.loads(json.dumps(results[e].to_dict())) for e in ("numpy", "compiled"))
    assert_close_tree(compiled, plain)
    np.testing.assert_array_equal(results["compiled"].co_assignment,
                                  results["numpy"].co_assignment)


def assert_close_tree(ours, theirs, path=""):
    """Equal structures and non-float leaves; floats within RELATIVE."""
    assert type(ours) is type(theirs), path
    if isinstance(ours, dict):
        assert ours.keys() == theirs.keys(), path
        for key in ours:
            assert_close_tree(ours[key], theirs[key], f"{path}/{key}")
    elif isinstance(ours, list):
        assert len(ours) == len(theirs), path
        for k, (a, b) in enumerate(zip(ours, theirs)):
            assert_close_tree(a, b, f"{path}[{k}]")
    elif isinstance(ours, float):
        assert ours == pytest.approx(theirs, rel=RELATIVE, abs=1e-12), path
    else:
        assert ours == theirs, path


# --------------------------------------------------------------------------- joining pieces


def join(engine, monkeypatch, *args):
    from calibrate.panel.stability import _join_pieces_lockstep

    with monkeypatch.context() as patch:
        patch.setattr(merges, "_COMPILED_PANEL", 0 if engine == "compiled" else 10**9)
        return _join_pieces_lockstep(*args)


def random_rules(rng):
    """Rules from lenient to strict, with zero to three size classes (none: never apart)."""
    for threshold in (0.0, 0.001, 0.003, 0.01):
        n_classes = int(rng.integers(0, 4))
        yield KeepApartRule(threshold, 0.05, np.array([0.002, 0.004, 0.01])[:n_classes],
                            np.sort(rng.uniform(0.0, 3.0, 40)))


@pytest.mark.parametrize("seed", range(6))
def test_compiled_join_gives_the_numpy_joins_pieces_batch_by_batch(seed, monkeypatch):
    # Case resamples of one panel, each with its own random pieces (raters sitting out
    # some resamples, one resample starting from every rater alone), joined in lockstep
    # by numpy and one batch after another compiled.
    rng = np.random.default_rng(seed)
    n_raters, p = int(rng.integers(15, 60)), int(rng.integers(2, 6))
    sscp, n, active = resampled_panel(seed, n_raters, p, count_seed=seed + 50, n_resamples=5)
    start = np.where(active, rng.integers(0, int(rng.integers(2, 20)), active.shape), -1)
    start[0] = np.where(active[0], np.arange(n_raters), -1)
    start[3] = -1   # a batch with no pieces
    kept = start.copy()
    n_groups = set()
    for rule in random_rules(rng):
        plain = join("numpy", monkeypatch, sscp, n, start, rule, p)
        compiled = join("compiled", monkeypatch, sscp, n, start, rule, p)
        np.testing.assert_array_equal(compiled, plain)
        n_groups.update(len(np.unique(row[row >= 0])) for row in plain[[0, 1, 2, 4]])
    np.testing.assert_array_equal(start, kept)
    assert len(n_groups) > 1   # the rules kept pieces apart and joined them


@pytest.mark.parametrize("which", ["shared 1-7", "incomplete 1-7", "incomplete 0/1"])
def test_compiled_join_of_one_batch_gives_the_numpy_joins_pieces(which, monkeypatch):
    from calibrate.panel.stability import _join_pieces
    from tests.unit.test_batched_grouping import starting_pieces

    full, p, rng, starts = starting_pieces(which)
    for start in starts:
        for rule in random_rules(rng):
            with monkeypatch.context() as patch:
                patch.setattr(merges, "_COMPILED_PANEL", 0)
                compiled = _join_pieces(full.sscp, full.n, start, rule, p)
            np.testing.assert_array_equal(compiled, join("numpy", monkeypatch, full.sscp[None],
                                                         full.n[None], start[None], rule, p)[0])


def test_compiled_join_breaks_exact_ties_as_the_numpy_join(monkeypatch):
    # Raters 3, 11 and 20 are one rater three times over, and 5 and 8 another: their
    # pair costs tie exactly, and the first pair in row-major order must go first.
    n_raters, p = 30, 4
    Z, who, _ = random_panel(12, n_raters, 90, p)
    stats = grouped_sscp(Z, who, n_raters)
    sscp, n = stats.sscp.copy(), stats.n.copy()
    sscp[[11, 20]], n[[11, 20]] = sscp[3], n[3]
    sscp[8], n[8] = sscp[5], n[5]
    start = np.arange(n_raters)[None]
    for rule in random_rules(np.random.default_rng(3)):
        plain = join("numpy", monkeypatch, sscp[None], n[None], start, rule, p)
        compiled = join("compiled", monkeypatch, sscp[None], n[None], start, rule, p)
        np.testing.assert_array_equal(compiled, plain)


def bench_panel(name, tmp_path):
    """A panel of benchmarks/bench_scale.py, written afresh into ``tmp_path`` (its own seed)."""
    import importlib.util
    from pathlib import Path

    from calibrate.data.ingest import load_study

    where = Path(__file__).resolve().parents[2] / "benchmarks" / "bench_scale.py"
    loader = importlib.util.spec_from_file_location("bench_scale", where)
    bench_scale = importlib.util.module_from_spec(loader)
    loader.loader.exec_module(bench_scale)
    spec = bench_scale.make_panel(tmp_path, int(name[-3:]), name[:-3])
    table = load_study(spec)
    phase = table.phases[0]
    design = table.phase_design(phase)
    first = phase.first.loc[phase.first["rater"].isin(phase.fit_raters),
                            ["rater", "case", "case_mean"]]
    first = first.rename(columns={"case_mean": "judgment"})
    complete = set(np.asarray(design.case_ids)[design.complete_rows()])
    return design, first.loc[first["case"].isin(complete)].reset_index(drop=True)


def test_group_raters_on_400_shared_raters_gives_the_same_groups_with_either_engine(
        monkeypatch, tmp_path):
    from calibrate.panel.grouping import group_raters

    design, first = bench_panel("shared400", tmp_path)
    results = {}
    for engine in ("numpy", "compiled"):
        with monkeypatch.context() as patch:
            patch.setattr(merges, "_COMPILED_PANEL", 0 if engine == "compiled" else 10**9)
            results[engine] = group_raters(design, first, rng=np.random.default_rng(17),
                                           scale_down=True)
    plain, compiled = (json.loads(json.dumps(results[e].to_dict())) for e in ("numpy", "compiled"))
    assert_close_tree(compiled, plain)
    np.testing.assert_array_equal(results["compiled"].co_assignment,
                                  results["numpy"].co_assignment)
