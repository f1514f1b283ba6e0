"""The compiled threshold search of the cut-off check gives the numpy search's numbers to the bit."""

import json

import numpy as np
import pytest

import calibrate.lens.compiled_search as compiled_search
import calibrate.lens.cutoffs as cutoffs
from calibrate.lens.cutoffs import (_CASES_FIRST_FROM, _CASES_FIRST_SETS, _RUN_BLOCK, _best_steps,
                                    _blocked_gain, _plan_steps, cutoff_check)
from tests.helpers import printed_words
from tests.simulated_panels import linear_panel

WEIGHTS = np.array([0.8, 0.5, -0.4])


def _design(rng, n):
    """Cues with ties, one with two values, one constant (dropped from the basis)."""
    return np.column_stack([rng.standard_normal(n), np.round(rng.standard_normal(n)),
                            rng.integers(0, 2, n), np.ones(n), np.round(rng.uniform(0, 9, n))])


@pytest.mark.parametrize("n", [60, 77, 200])                     # 60: a whole number of blocks
@pytest.mark.parametrize("sets", [1, 40, 95, _CASES_FIRST_FROM, 160, _CASES_FIRST_SETS + 37])
def test_compiled_search_equals_the_numpy_search(n, sets):
    rng = np.random.default_rng(n * 1000 + sets)
    X = _design(rng, n)
    plan = _plan_steps(X, [0, 1, 2, 3, 4], max(5, int(np.ceil(0.05 * n))))
    assert plan.step_weights.shape[0] >= 2                       # the constant cue has no threshold
    responses = np.clip(np.round(3 + X[:, [0, 1, 2, 4]] @ np.array([0.8, 0.4, 0.5, 0.1])
                                 + rng.standard_normal((sets, n))), 1, 5)
    before = responses.copy()
    ours, _ = _best_steps(plan, responses, compiled=True)
    numpy_search, _ = _best_steps(plan, responses, compiled=False)
    np.testing.assert_array_equal(ours, numpy_search)
    np.testing.assert_array_equal(responses, before)


@pytest.mark.parametrize("n", [12, 13, 50])
def test_kernels_equal_numpy_on_random_sums(n):
    rng = np.random.default_rng(n)
    columns, sets = 3, 33
    resid = np.round(rng.standard_normal((sets, n)), 1)          # ties among the residuals
    resid[:, :2] = 0.0
    orders = np.concatenate([rng.permutation(n) for _ in range(columns)]).astype(np.intp)
    weights = rng.uniform(size=(columns, n)) * (rng.uniform(size=(columns, n)) < 0.6)
    running = np.cumsum(resid[:, orders].reshape(sets, columns, n), axis=2)
    np.square(running, out=running)
    running *= weights
    np.testing.assert_array_equal(compiled_search.best_running_gain(resid, orders, weights),
                                  running.reshape(sets, -1).max(axis=1))
    padded = -(-n // _RUN_BLOCK) * _RUN_BLOCK
    padded_weights = np.zeros((columns, padded, 1))
    padded_weights[:, :n, 0] = weights
    cases_first = np.ascontiguousarray(resid.T)
    expected = _blocked_gain(cases_first, orders.reshape(columns, n), padded_weights,
                             np.empty((columns, padded, sets)), n, padded)
    np.testing.assert_array_equal(
        compiled_search.best_blocked_gain(cases_first, orders, weights, _RUN_BLOCK), expected)


@pytest.mark.parametrize("per_rater", [50, 120])                 # 50 of 120 cases: linked; 120: shared
def test_cutoff_check_is_identical_with_and_without_the_kernel(monkeypatch, per_rater):
    panel = linear_panel(np.random.default_rng(per_rater), n_cases=120, n_raters=8, per_rater=per_rater,
                         weights=WEIGHTS, noise=1.0)
    calls = {"best_running_gain": 0, "best_blocked_gain": 0}
    for name in calls:
        kernel = getattr(compiled_search, name)

        def counted(*args, kernel=kernel, name=name):
            calls[name] += 1
            return kernel(*args)
        monkeypatch.setattr(compiled_search, name, counted)
    results = {}
    for compiled in (True, False):
        monkeypatch.setattr(cutoffs, "COMPILED_SEARCH_FROM", 0 if compiled else 10**9)
        for hits in (20, None):   # None: every rater runs all rounds (40, 80, 160, 119 sets)
            result = cutoff_check(panel.design, panel.first, rng=3, n_sim=399, enough_hits=hits)
            results[compiled, hits] = json.dumps(result.to_dict(), sort_keys=True, default=str)
        if compiled:
            # the linked raters' rounds take both searches; the shared block's are all cases first
            assert all(calls.values()) if per_rater < 120 else calls["best_blocked_gain"], calls
            seen = dict(calls)
    assert calls == seen                                         # numpy only below the threshold
    for hits in (20, None):
        assert results[True, hits] == results[False, hits]


def test_numba_loads_only_from_the_threshold():
    # A panel below COMPILED_SEARCH_FROM tested raters keeps numpy and never imports numba.
    code = (
        "import sys, numpy as np\n"
        "import calibrate.lens.cutoffs as cutoffs\n"
        "from tests.simulated_panels import linear_panel\n"
        "panel = linear_panel(np.random.default_rng(4), n_cases=80, n_raters=6, per_rater=40,\n"
        "                     weights=np.array([0.8, 0.5, -0.4]), noise=1.0)\n"
        "for start in (7, 6):\n"
        "    cutoffs.COMPILED_SEARCH_FROM = start\n"
        "    cutoffs.cutoff_check(panel.design, panel.first, rng=1, n_sim=99)\n"
        "    print('numba' in sys.modules, flush=True)\n"
    )
    assert printed_words(code) == ["False", "True"]
