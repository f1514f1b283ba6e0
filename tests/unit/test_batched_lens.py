"""The batched lens-model and drift bootstraps equal a plain per-rater loop (issue 17).

The references refit every (rater, resample) from its expanded rows with numpy's
``lstsq`` and plain correlations, with the same draws, and must agree to 1e-9.
"""

import numpy as np
import pytest

from calibrate.lens.model import (INTERVAL_FIGURES, _BlockTerms, _per_rater_intervals,
                                  lens_intervals, shared_case_blocks)
from calibrate.policy.resampling import bca_interval


def _corr(a, b):
    a, b = a - a.mean(), b - b.mean()
    den = np.sqrt((a @ a) * (b @ b))
    return float(a @ b / den) if den > 0 else float("nan")


def _lens_by_rows(X, y, crit):
    """r_a, G, C, R_e of one rater from rows (NaN where a model cannot be fitted)."""
    nan = dict.fromkeys(("g", "c", "r_e"), float("nan"))
    r_a = _corr(y, crit)
    D = np.column_stack([np.ones(len(y)), X])
    if len(y) <= X.shape[1] + 1 or np.linalg.matrix_rank(D) < D.shape[1] or np.ptp(y) == 0:
        return {"r_a": r_a, **nan}
    fit_s = D @ np.linalg.lstsq(D, y, rcond=None)[0]
    fit_e = D @ np.linalg.lstsq(D, crit, rcond=None)[0]
    res_s, res_e = y - fit_s, crit - fit_e
    exact = (res_s @ res_s <= 1e-12 * ((y - y.mean()) @ (y - y.mean()))
             or res_e @ res_e <= 1e-12 * ((crit - crit.mean()) @ (crit - crit.mean())))
    return {"r_a": r_a, "g": _corr(fit_s, fit_e), "c": float("nan") if exact else _corr(res_s, res_e),
            "r_e": np.sqrt(max(1 - ((res_e @ res_e) / ((crit - crit.mean()) @ (crit - crit.mean()))), 0.0))}


def _panel(binary: bool, seed: int = 3, n_raters: int = 9, n_cases: int = 40, p: int = 3):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n_cases, p))
    crit = X @ np.array([0.6, -0.4, 0.2][:p]) + rng.normal(size=n_cases)
    weights = rng.normal(0.5, 0.3, size=(n_raters, p))
    latent = X @ weights.T + rng.normal(scale=0.8, size=(n_cases, n_raters))
    if binary:
        Y = (latent > 0.3).astype(float)
    else:  # 1-7 with a ceiling: most raters pile up at 6 and 7
        Y = np.clip(np.round(4.5 + 1.3 * latent), 1, 7)
    return X, crit, Y


@pytest.mark.parametrize("binary", [False, True])
def test_block_resamples_equal_per_rater_refits(binary):
    X, crit, Y = _panel(binary)
    n, p = X.shape
    terms = _BlockTerms(X, crit, Y)
    rng = np.random.default_rng(11)
    pick = np.floor(rng.random((25, n)) * n).astype(np.intp)
    counts = np.stack([np.bincount(row, minlength=n) for row in pick]).astype(float)
    got = terms.parts(counts, p)
    jack = terms.parts_without(np.arange(n), p)
    for b in range(counts.shape[0]):
        rows = np.repeat(np.arange(n), counts[b].astype(int))
        for r in range(Y.shape[1]):
            want = _lens_by_rows(X[rows], Y[rows, r], crit[rows])
            for k in INTERVAL_FIGURES:
                np.testing.assert_allclose(got[k][b, r], want[k], rtol=1e-9, atol=1e-12, equal_nan=True)
    for i in range(n):
        rows = np.delete(np.arange(n), i)
        for r in range(Y.shape[1]):
            want = _lens_by_rows(X[rows], Y[rows, r], crit[rows])
            for k in INTERVAL_FIGURES:
                np.testing.assert_allclose(jack[k][i, r], want[k], rtol=1e-9, atol=1e-12, equal_nan=True)


def _long(X, crit, Y, cases_of):
    """Rows [cues, judgment, criterion] with group and case, raters in a shuffled row order."""
    rows = [(g, i) for g, cases in enumerate(cases_of) for i in cases]
    order = np.random.default_rng(5).permutation(len(rows))
    g = np.array([rows[j][0] for j in order])
    case = np.array([rows[j][1] for j in order])
    Z = np.column_stack([X[case], Y[case, g], crit[case]])
    return Z, g, case


def _assert_bca_of_rater(got, r, boot, X, y, crit):
    """The 90% BCa limits of rater ``r`` in ``got`` equal those of the reference resamples
    ``boot`` with a jackknife of plain refits."""
    full = _lens_by_rows(X, y, crit)
    loo = [_lens_by_rows(np.delete(X, i, 0), np.delete(y, i), np.delete(crit, i)) for i in range(len(y))]
    for k in INTERVAL_FIGURES:
        jack = np.array([[v[k]] for v in loo])
        jack = jack if np.isfinite(jack).any() else np.zeros_like(jack)
        low, high = bca_interval(np.array([full[k]]), boot[k][:, None], jack, alpha=0.1)
        np.testing.assert_allclose([got[k][0][r], got[k][1][r]], [low[0], high[0]],
                                   rtol=1e-9, atol=1e-12, equal_nan=True)


@pytest.mark.parametrize("binary", [False, True])
def test_lens_intervals_of_a_block_equal_a_per_rater_loop(binary):
    X, crit, Y = _panel(binary, n_raters=8)
    n, p = X.shape
    Z, g, case = _long(X, crit, Y, [range(n)] * 8)
    n_boot = 60
    got = lens_intervals(Z, g, 8, p, n_boot=n_boot, rng=np.random.default_rng(2), level=0.9, case=case)
    pick = np.floor(np.random.default_rng(2).random((n_boot, n)) * n).astype(np.intp)
    for r in range(8):
        boot = {k: np.empty(n_boot) for k in INTERVAL_FIGURES}
        for b in range(n_boot):
            rows = np.sort(pick[b])
            for k, v in _lens_by_rows(X[rows], Y[rows, r], crit[rows]).items():
                boot[k][b] = v
        _assert_bca_of_rater(got, r, boot, X, Y[:, r], crit)


def test_raters_outside_blocks_keep_their_independent_draws():
    # An incomplete design: 8 raters on cases 0-39, three raters on cases of their own.
    X, crit, Y = _panel(False, n_raters=11, n_cases=60)
    p = X.shape[1]
    cases_of = [range(40)] * 8 + [range(20, 60), range(0, 60, 2), range(10, 50)]
    Z, g, case = _long(X, crit, Y, cases_of)
    assert [b.tolist() for b in shared_case_blocks(case, g, 11)] == [list(range(8))]
    got = lens_intervals(Z, g, 11, p, n_boot=40, rng=np.random.default_rng(4), case=case)
    alone = g >= 8
    want = _per_rater_intervals(Z[alone], g[alone] - 8, 3, p, n_boot=40, rng=np.random.default_rng(4),
                                level=0.95)
    no_blocks = lens_intervals(Z, g, 11, p, n_boot=40, rng=np.random.default_rng(4))
    for k in INTERVAL_FIGURES:
        np.testing.assert_array_equal(got[k][0][8:], want[k][0])
        np.testing.assert_array_equal(got[k][1][8:], want[k][1])
        assert np.isfinite(got[k][0][:8]).all()
        # Without the case of each row, every rater draws on their own, as before.
        assert np.isfinite(no_blocks[k][0]).all()


# ---- drift: the R_s change bootstrap ------------------------------------------------

def _r_s_by_rows(X, y):
    D = np.column_stack([np.ones(len(y)), X])
    if len(y) <= X.shape[1] + 1 or np.linalg.matrix_rank(D) < D.shape[1] or np.ptp(y) == 0:
        return float("nan")
    res = y - D @ np.linalg.lstsq(D, y, rcond=None)[0]
    return float(np.sqrt(max(1.0 - (res @ res) / ((y - y.mean()) @ (y - y.mean())), 0.0)))


@pytest.mark.parametrize("binary", [False, True])
def test_r_s_change_bootstrap_equals_a_per_rater_loop(binary):
    from calibrate.consistency.reading_order import _bootstrap_r_s_change

    rng = np.random.default_rng(8 + binary)
    sizes = [(14, 13), (20, 20), (9, 8), (16, 15), (25, 24)]   # odd and even counts, small halves
    p = 3
    X_rows, y_rows, cells, positions = [], [], [], []
    for r, halves in enumerate(sizes):
        for h, m in enumerate(halves):
            X = np.column_stack([rng.integers(1, 8, m), rng.integers(0, 2, m), rng.normal(size=m)])
            latent = X @ np.array([0.4, 0.8, 0.3]) + rng.normal(size=m)
            y = (latent > np.median(latent)).astype(float) if binary else np.clip(np.round(latent), 1, 7)
            X_rows.append(X), y_rows.append(y), cells.append(np.full(m, 2 * r + h))
            positions.append(np.arange(m) + h * 100.0)
    X, y = np.concatenate(X_rows), np.concatenate(y_rows)
    cell, position = np.concatenate(cells), np.concatenate(positions)
    shuffle = np.random.default_rng(1).permutation(len(y))
    Z = np.column_stack([X, y])[shuffle]
    n_resamples = 70   # two chunks of the default 50
    low, high = _bootstrap_r_s_change(Z, cell[shuffle], position[shuffle], 2 * len(sizes), p,
                                      n_resamples, np.random.default_rng(3))
    # The reference: the same uniform draws, each cell's rows in reading order, refitted one by one.
    draws = np.random.default_rng(3)
    longest = max(max(s) for s in sizes)
    u = np.concatenate([draws.random((50, 2 * len(sizes), longest)),
                        draws.random((20, 2 * len(sizes), longest))])
    for r, halves in enumerate(sizes):
        diffs = np.empty(n_resamples)
        for b in range(n_resamples):
            r_s = []
            for h, m in enumerate(halves):
                rows = np.flatnonzero(cell == 2 * r + h)
                rows = rows[np.argsort(position[rows])]
                pick = rows[np.minimum(np.floor(u[b, 2 * r + h, :m] * m).astype(int), m - 1)]
                r_s.append(_r_s_by_rows(X[pick], y[pick]))
            diffs[b] = r_s[1] - r_s[0]
        want = np.nanpercentile(diffs, [2.5, 97.5])
        np.testing.assert_allclose([low[r], high[r]], want, rtol=1e-9, atol=1e-12)


def test_stacked_r_squared_keeps_the_rank_rule():
    from calibrate.consistency.reading_order import _r_s_from
    from calibrate.policy.linalg import grouped_sscp, r_squared_from_sscp

    rng = np.random.default_rng(0)
    G, n, p = 300, 12, 4
    Z = rng.normal(size=(G * n, p + 1))
    Z[:n * 5, 1] = 2.0                          # a constant cue
    Z[n * 5:n * 10, 2] = 3 * Z[n * 5:n * 10, 3]  # collinear cues
    Z[n * 10:n * 12, 3] = Z[n * 10:n * 12, 2] + 1e-9 * rng.normal(size=n * 2)  # near the line
    Z[n * 12:n * 13, p] = 1.0                   # a constant judgment
    stats = grouped_sscp(Z, np.repeat(np.arange(G), n), G)
    want, _ = r_squared_from_sscp(stats, np.arange(p), p)
    np.testing.assert_allclose(_r_s_from(stats, p), np.sqrt(np.clip(want, 0, 1)), rtol=1e-9, equal_nan=True)


def test_drift_takes_fewer_resamples_above_the_panel_size_and_says_so(monkeypatch):
    from calibrate.consistency import reading_order as ro
    from tests.unit.test_drift import _setup

    assert ro.drift_resamples(500, 400) == 500
    assert ro.drift_resamples(500, 2000) == 125
    assert ro.drift_resamples(500, 10_000) == ro.DRIFT_MIN_RESAMPLES
    design, ordered = _setup(4, n_raters=6, length=60)
    monkeypatch.setattr(ro, "DRIFT_FULL_RESAMPLE_RATERS", 4)
    monkeypatch.setattr(ro, "DRIFT_RESAMPLE_WORK", 6 * 150)
    reduced = ro.drift(design, ordered, rng=1)
    assert reduced.n_resamples == 150
    assert reduced.reduced_forms == ("The intervals of the change in R_s between the halves of the reading "
                                     "order (drift) from 150 resamples instead of 500 on this panel size "
                                     "(6 raters).",)
    assert reduced.to_dict()["reduced_forms"] == list(reduced.reduced_forms)
    full = ro.drift(design, ordered, rng=1, scale_down=False)
    assert full.n_resamples == 500 and full.reduced_forms == ()


def test_lens_takes_fewer_resamples_for_raters_on_their_own_cases_and_says_so(monkeypatch):
    from calibrate.lens import model
    from calibrate.lens.model import lens_model, lens_resamples
    from tests.lens_panels import simulated_raters

    assert lens_resamples(1000, 500) == 1000
    assert lens_resamples(1000, 2000) == 250
    design, first, crit = simulated_raters(np.random.default_rng(1), 6, 30)
    monkeypatch.setattr(model, "LENS_FULL_RESAMPLE_RATERS", 4)
    monkeypatch.setattr(model, "LENS_RESAMPLE_WORK", 6 * 40)
    monkeypatch.setattr(model, "LENS_MIN_RESAMPLES", 20)
    reduced = lens_model(design, first, crit, n_boot=100, rng=np.random.default_rng(2))
    assert [r.n_boot for r in reduced.raters] == [40] * 6
    assert reduced.reduced_forms == ("The intervals of r_a, G, C and R_e (lens model) from 40 resamples "
                                     "instead of 100 for the 6 raters who do not read the same cases as 7 "
                                     "or more others, on this panel size.",)
    full = lens_model(design, first, crit, n_boot=100, rng=np.random.default_rng(2), scale_down=False)
    assert [r.n_boot for r in full.raters] == [100] * 6 and full.reduced_forms == ()


@pytest.mark.parametrize("binary", [False, True])
def test_lens_intervals_of_raters_on_their_own_cases_equal_a_per_rater_loop(binary):
    X, crit, Y = _panel(binary, n_raters=3, n_cases=60)
    p = X.shape[1]
    cases_of = [range(0, 40), range(15, 60), range(0, 60, 2)]   # unequal sizes: padding slots
    Z, g, case = _long(X, crit, Y, cases_of)
    n_boot = 50
    got = lens_intervals(Z, g, 3, p, n_boot=n_boot, rng=np.random.default_rng(6), level=0.9)
    sizes = np.bincount(g)
    u = np.random.default_rng(6).random((3, n_boot, sizes.max()))
    for r in range(3):
        rows = np.flatnonzero(g == r)
        Xr, yr, cr = Z[rows, :p], Z[rows, p], Z[rows, p + 1]
        boot = {k: np.empty(n_boot) for k in INTERVAL_FIGURES}
        for b in range(n_boot):
            pick = np.floor(u[r, b, :rows.size] * rows.size).astype(int)
            for k, v in _lens_by_rows(Xr[pick], yr[pick], cr[pick]).items():
                boot[k][b] = v
        _assert_bca_of_rater(got, r, boot, Xr, yr, cr)


def test_every_reduced_form_is_warned_once_under_its_analysis(monkeypatch, tmp_path):
    # Each analysis states its reduced forms in ``reduced_forms``; the audit warns each once
    # (with the way back to the full form), not a second time in other words.
    from calibrate.analyses import audit
    from calibrate.consistency import reading_order as ro
    from calibrate.data.demo import write_demo

    monkeypatch.setattr(ro, "DRIFT_FULL_RESAMPLE_RATERS", 4)
    monkeypatch.setattr(ro, "DRIFT_RESAMPLE_WORK", 14 * 150)
    result = audit(write_demo(tmp_path / "demo").spec, n_boot=200).to_dict()
    for panel in result["panels"]:
        assert any("(drift) from" in t for t in panel["reduced_forms"])
        for text in panel["reduced_forms"]:
            said = [w for w in result["warnings"] if text in w["message"] and w["phase"] == panel["phase"]]
            assert len(said) == 1 and "--full-extras" in said[0]["message"], text
    assert not any("keep the run short" in w["message"] for w in result["warnings"])
