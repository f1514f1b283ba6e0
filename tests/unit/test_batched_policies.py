"""The policy stage's batched paths equal a per-rater reference (issue 17, policies and cut-offs).

Each batched computation over all raters (and all simulated sets) is set against a plain
loop over raters, on small panels: a shared design (every rater reads the same cases) and an
incomplete one (raters of 14-60 cases), on a 1-7 scale with ends; to 1e-9.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from calibrate.policy.linear_nulls import fit_rounded_normal

TOL = {"rtol": 1e-9, "atol": 1e-9}


def _panel(shared: bool, seed=5, n_raters=10, p=3):
    rng = np.random.default_rng(seed)
    sizes = np.full(n_raters, 40) if shared else rng.integers(14, 61, n_raters)
    groups = np.repeat(np.arange(n_raters), sizes)
    X = (np.tile(rng.normal(size=(40, p)), (n_raters, 1)) if shared
         else rng.normal(size=(groups.size, p)))
    latent = 5.0 + X @ np.linspace(0.8, 0.2, p) + rng.normal(0, 0.9, groups.size)
    return X, np.clip(np.round(latent), 1, 7), groups, n_raters


def _interval_loglik(theta, X, y):
    """The rounded-normal log-likelihood written out with scipy.stats.norm (one rater)."""
    mu = theta[0] + X @ theta[1:-1]
    sigma = np.exp(theta[-1])
    lower = np.where(y <= 1, -np.inf, y - 0.5)
    upper = np.where(y >= 7, np.inf, y + 0.5)
    prob = stats.norm.cdf((upper - mu) / sigma) - stats.norm.cdf((lower - mu) / sigma)
    return np.log(np.maximum(prob, 1e-300)).sum()


@pytest.mark.parametrize("shared", [True, False])
def test_rounded_normal_fit_of_all_raters_equals_each_rater_fitted_alone(shared):
    X, y, groups, G = _panel(shared)
    batched = fit_rounded_normal(X, y, groups, G, scale_min=1, scale_max=7)
    assert batched.converged.all()
    for g in range(G):
        rows = groups == g
        alone = fit_rounded_normal(X[rows], y[rows], np.zeros(rows.sum(), dtype=int), 1,
                                   scale_min=1, scale_max=7)
        np.testing.assert_allclose(batched.coef[g], alone.coef[0], **TOL)
        np.testing.assert_allclose(batched.intercept[g], alone.intercept[0], **TOL)
        np.testing.assert_allclose(batched.sigma[g], alone.sigma[0], **TOL)


def test_rounded_normal_fit_is_the_maximum_a_general_optimizer_finds():
    # Independent reference: scipy.optimize (BFGS from least squares) on the written-out
    # likelihood, rater by rater; ours must be at least as high and at the same point.
    X, y, groups, G = _panel(False)
    fit = fit_rounded_normal(X, y, groups, G, scale_min=1, scale_max=7)
    for g in range(3):
        rows = groups == g
        ours = np.r_[fit.intercept[g], fit.coef[g], np.log(fit.sigma[g])]
        start = np.r_[np.linalg.lstsq(np.column_stack([np.ones(rows.sum()), X[rows]]), y[rows],
                                      rcond=None)[0], 0.0]
        best = optimize.minimize(lambda t: -_interval_loglik(t, X[rows], y[rows]), start,
                                 method="BFGS", options={"gtol": 1e-10})
        assert _interval_loglik(ours, X[rows], y[rows]) >= -best.fun - 1e-9
        np.testing.assert_allclose(ours, best.x, atol=1e-4)


def _reset_by_projections_on_rows(cues, Y, rcond=1e-12):
    """The curvature F as the code computed it before issue 17: every projection back on the rows."""
    def project(block):
        return np.matmul(cues.basis, np.matmul(np.swapaxes(cues.basis, 1, 2), block))

    def centred(block):
        mean = block.sum(axis=1) / cues.n[:, None]
        return (block - mean[:, None, :]) * cues.mask[:, :, None]

    y = centred(cues.block(Y))
    fitted = project(y)
    rss0 = np.maximum((y * y).sum(axis=1) - (fitted * fitted).sum(axis=1), 0.0)
    z = fitted / np.sqrt((fitted * fitted).sum(axis=1) / cues.n[:, None])[:, None, :]
    square = centred(np.where(cues.mask[:, :, None] > 0, z * z, 0.0))
    cube = centred(np.where(cues.mask[:, :, None] > 0, z * z * z, 0.0))
    own = ((square * square).sum(axis=1), (cube * cube).sum(axis=1))
    square, cube = square - project(square), cube - project(cube)
    a11, a22, a12 = ((square * square).sum(axis=1), (cube * cube).sum(axis=1),
                     (square * cube).sum(axis=1))
    b1, b2 = (square * y).sum(axis=1), (cube * y).sum(axis=1)
    det = a11 * a22 - a12 * a12
    rss1 = np.maximum(rss0 - (a22 * b1 * b1 - 2.0 * a12 * b1 * b2 + a11 * b2 * b2) / det, 0.0)
    ok = (a11 > rcond * own[0]) & (det > rcond * own[1] * a11)
    df_den = cues.n - cues.p - 3.0
    statistic = ((rss0 - rss1) / 2.0) / (rss1 / df_den[:, None])
    ok &= cues.rank_ok[:, None] & (df_den[:, None] > 0) & np.isfinite(statistic)
    return np.where(ok, np.maximum(statistic, 0.0), np.nan).T


@pytest.mark.parametrize("shared", [True, False])
def test_curvature_statistics_from_power_sums_equal_the_projections_on_rows(shared):
    from calibrate.policy import diagnostics as dg

    X, y, groups, G = _panel(shared)
    rng = np.random.default_rng(9)
    sets = np.vstack([y, np.clip(y + rng.integers(-1, 2, (30, y.size)), 1, 7)])
    sets[1, groups == 2] = 4.0   # one rater's judgments constant in one set: NaN in both
    cues = dg._SharedCueBlocks(X, groups, G)
    with np.errstate(invalid="ignore", divide="ignore"):
        expected = _reset_by_projections_on_rows(cues, sets)
    ours = dg.reset_statistics_shared_cues(cues, sets)
    np.testing.assert_allclose(ours, expected, equal_nan=True, **TOL)
    assert np.isnan(ours[1, 2]) and np.isfinite(ours[0]).all()


def _sequential_p_value_one_rater(plan, observed, sets, enough_hits, chunk=100):
    """The cut-off check's stopping rule as it ran rater by rater before issue 17."""
    from calibrate.lens.cutoffs import _best_steps

    hits, drawn, usable = 0, 0, 0
    margin = observed - 1e-12 * abs(observed)
    while drawn < len(sets):
        size = min(chunk, len(sets) - drawn)
        stat, _ = _best_steps(plan, sets[drawn:drawn + size])
        stat = stat[np.isfinite(stat)]
        reached = np.flatnonzero(stat >= margin)
        if enough_hits and hits + reached.size >= enough_hits:
            return enough_hits / (usable + reached[enough_hits - hits - 1] + 1)
        hits += reached.size
        usable += stat.size
        drawn += size
    return (1.0 + hits) / (1.0 + usable)


@pytest.mark.parametrize("enough_hits", [20, None])
def test_cutoff_p_values_of_raters_together_equal_each_rater_alone(enough_hits):
    # The same simulated sets per rater, drawn in rounds for all raters at once or one
    # rater at a time: the same p-values.
    from calibrate.lens.cutoffs import _best_steps, _plan_steps, sequential_p_values

    rng = np.random.default_rng(4)
    n, R, n_sim = 40, 6, 300
    X = rng.normal(size=(n, 3))
    plan = _plan_steps(X, [0, 1, 2], 5)
    Y = X @ np.array([0.5, 0.3, 0.2]) + rng.normal(size=(R, n))
    Y[0] += 1.5 * (X[:, 0] < -0.3)        # one rater with a planted cut
    observed = _best_steps(plan, Y)[0]
    sets = rng.normal(size=(R, n_sim, n)) + (Y - rng.normal(size=(R, n)))[:, None, :] * 0.1
    taken = np.zeros(R, dtype=int)

    def simulate(size, which):
        out = np.stack([sets[i, taken[i]:taken[i] + size] for i in which], axis=1)
        taken[which] += size
        return out

    together = sequential_p_values(plan, observed, simulate, n_sim, enough_hits)
    alone = [_sequential_p_value_one_rater(plan, observed[i], sets[i], enough_hits) for i in range(R)]
    np.testing.assert_allclose(together, alone, **TOL)


@pytest.mark.parametrize("shared", [True, False])
def test_cutoff_check_by_design_blocks_equals_the_step_search_of_each_rater(shared):
    import pandas as pd

    from calibrate.data.cues import CueRule, build_cue_design
    from calibrate.lens.cutoffs import cutoff_check, step_search

    rng = np.random.default_rng(21)
    n_cases, R = 60, 8
    cases = pd.DataFrame(rng.normal(size=(n_cases, 3)), columns=["a", "b", "c"],
                         index=pd.Index([f"k{i:03d}" for i in range(n_cases)], name="case"))
    design = build_cue_design(cases, [CueRule("a"), CueRule("b"), CueRule("c")])
    lines = []
    for r in range(R):
        seen = (rng.permutation(n_cases) if shared
                else rng.choice(n_cases, int(rng.integers(30, 61)), replace=False))
        latent = 4 + cases.to_numpy()[seen] @ np.array([0.8, 0.5, 0.3]) + rng.normal(0, 0.8, seen.size)
        lines += [(f"r{r}", cases.index[i], float(v)) for i, v in zip(seen, np.clip(np.round(latent), 1, 7))]
    first = pd.DataFrame(lines, columns=["rater", "case", "judgment"])
    result = cutoff_check(design, first, rng=3, scale="ordinal", scale_min=1, scale_max=7, n_sim=99)
    for rater in result.raters:
        mine = first[first["rater"] == rater.rater]
        X = cases.loc[mine["case"]].to_numpy()
        y = mine["judgment"].to_numpy()
        side = max(5, int(np.ceil(0.05 * y.size)))
        stat, where = step_search(X, y[None, :], [0, 1, 2], side)
        assert rater.statistic == pytest.approx(stat[0], rel=1e-9)
        column = int(where[0, 0])
        xs = np.sort(X[:, column])
        assert rater.threshold == pytest.approx(0.5 * (xs[where[0, 1] - 1] + xs[where[0, 1]]), rel=1e-12)
        assert rater.cue == "abc"[column]
        below = (X[:, column] < rater.threshold).astype(float)
        full = np.linalg.lstsq(np.column_stack([np.ones(y.size), X, below]), y, rcond=None)[0]
        assert rater.step == pytest.approx(full[-1], rel=1e-9)
        assert 0 < rater.p_value <= 1


@pytest.mark.parametrize("step", [1.0, 0.5])
def test_null_draws_in_place_equal_the_plain_formula(step):
    from calibrate.policy.linear_nulls import LinearNull

    rng = np.random.default_rng(2)
    mean, sigma = rng.normal(4, 2, 50), rng.uniform(0.2, 2, 50)
    null = LinearNull("rounded", mean, sigma, np.full(50, np.nan), np.ones(50, bool), 1.0, 7.0, step)
    draws = null.draw(np.random.default_rng(8), 30)
    latent = mean + sigma * np.random.default_rng(8).standard_normal((30, 50))
    expected = np.clip(1.0 + step * np.round((latent - 1.0) / step), 1.0, 7.0)
    assert np.array_equal(draws, expected)


def test_importance_intervals_from_fewer_resamples_only_above_the_panel_size(monkeypatch):
    # The reduced form takes the first resamples of the same draws: R_s intervals unchanged,
    # the importance intervals equal to those of a full run with that many resamples.
    import pandas as pd

    from calibrate.data.cues import CueRule, build_cue_design
    from calibrate.policy import fit as policy_fit

    rng = np.random.default_rng(13)
    cases = pd.DataFrame(rng.normal(size=(50, 3)), columns=["a", "b", "c"],
                         index=pd.Index([f"k{i:03d}" for i in range(50)], name="case"))
    design = build_cue_design(cases, [CueRule("a"), CueRule("b"), CueRule("c")])
    first = pd.DataFrame([(f"r{r}", c, float(4 + cases.loc[c] @ np.array([0.8, 0.4, 0.2])
                                           + rng.normal()))
                          for r in range(6) for c in cases.index], columns=["rater", "case", "judgment"])
    full = policy_fit.fit_policies(design, first, scale="continuous", n_boot=200, rng=2)
    assert full.reduced_forms == ()
    monkeypatch.setattr(policy_fit, "IMPORTANCE_FULL_UP_TO", 5)
    monkeypatch.setattr(policy_fit, "IMPORTANCE_REDUCED_RESAMPLES", 60)
    reduced = policy_fit.fit_policies(design, first, scale="continuous", n_boot=200, rng=2)
    kept = policy_fit.fit_policies(design, first, scale="continuous", n_boot=200, rng=2, scale_down=False)
    assert "60 resamples instead of 200" in reduced.reduced_forms[0] and kept.reduced_forms == ()
    short = policy_fit.fit_policies(design, first, scale="continuous", n_boot=60, rng=2)
    for a, b, c, d in zip(full.raters, reduced.raters, kept.raters, short.raters):
        assert a.r_ci == b.r_ci == c.r_ci and a.importance_ci == c.importance_ci
        assert b.importance_ci.keys() == d.importance_ci.keys()
        np.testing.assert_allclose([b.importance_ci[k] for k in b.importance_ci],
                                   [d.importance_ci[k] for k in d.importance_ci], **TOL)


def test_cutoff_check_stops_sooner_only_above_the_panel_size(monkeypatch):
    import pandas as pd

    from calibrate.data.cues import CueRule, build_cue_design
    from calibrate.lens import cutoffs

    rng = np.random.default_rng(5)
    cases = pd.DataFrame(rng.normal(size=(40, 2)), columns=["a", "b"],
                         index=pd.Index([f"k{i:03d}" for i in range(40)], name="case"))
    design = build_cue_design(cases, [CueRule("a"), CueRule("b")])
    first = pd.DataFrame([(f"r{r}", c, float(np.round(4 + cases.loc[c].sum() + rng.normal())))
                          for r in range(5) for c in cases.index], columns=["rater", "case", "judgment"])
    run = lambda **kw: cutoffs.cutoff_check(design, first, rng=1, scale="continuous", n_sim=199, **kw)
    assert run().reduced_forms == ()
    monkeypatch.setattr(cutoffs, "FULL_HITS_UP_TO", 3)
    reduced, full = run(), run(scale_down=False)
    assert "stops once 10 simulated values" in reduced.reduced_forms[0] and full.reduced_forms == ()
    assert [r.p_value for r in full.raters] == [r.p_value for r in run(enough_hits=20, scale_down=False).raters]
    assert [r.p_value for r in reduced.raters] == [r.p_value for r in run(enough_hits=10).raters]


def test_curvature_first_pass_uses_fewer_draws_only_above_the_panel_size(monkeypatch):
    import pandas as pd

    from calibrate.data.cues import CueRule, build_cue_design
    from calibrate.policy import fit as policy_fit

    rng = np.random.default_rng(19)
    cases = pd.DataFrame(rng.normal(size=(40, 2)), columns=["a", "b"],
                         index=pd.Index([f"k{i:03d}" for i in range(40)], name="case"))
    design = build_cue_design(cases, [CueRule("a"), CueRule("b")])
    first = pd.DataFrame([(f"r{r}", c, float(np.clip(np.round(4 + cases.loc[c].sum() + rng.normal()), 1, 7)))
                          for r in range(4) for c in cases.index], columns=["rater", "case", "judgment"])
    run = lambda **kw: policy_fit.fit_policies(design, first, scale="ordinal", scale_min=1, scale_max=7,
                                               n_boot=0, rng=4, **kw)
    monkeypatch.setattr(policy_fit, "IMPORTANCE_FULL_UP_TO", 3)
    reduced, full = run(), run(scale_down=False)
    assert any("99 simulated judgment sets" in t for t in reduced.reduced_forms)
    assert full.reduced_forms == ()
    p_reduced = np.array([r.reset["p_value"] for r in reduced.raters])
    p_full = np.array([r.reset["p_value"] for r in full.raters])
    assert np.allclose(p_reduced * 100, np.round(p_reduced * 100))   # steps of 1/100: 99 draws
    assert not np.array_equal(p_reduced, p_full) and np.all((0 < p_full) & (p_full <= 1))
