"""Plan a rating exercise: choose the files, assign them to raters, hide repeats.

Choosing the files
------------------
``uncorrelated`` (default) picks, by the same kind of exchange, the set whose cue
correlation matrix has the largest determinant: det(R) = 1 when the cues are
uncorrelated and falls to 0 as they become collinear (its use as a collinearity
measure goes back to Farrar & Glauber 1967, from memory). The weights are then
nearly independent; the cost is that files typical of a correlated season (high on
every cue together) are under-represented. ``spread`` picks the set that maximises :math:`\\det(X^\\top X)` of the
standardized cues with an intercept (D-optimality) by Fedorov's (1972, *Theory of
Optimal Experiments*, ch. 3) exchange: swap the chosen file ``i`` for the pool file
``j`` with the largest determinant ratio
:math:`(1 - d_i)(1 + d_j) + d_{ij}^2`, :math:`d_{ij} = x_i^\\top M^{-1} x_j`, until no
swap gains. The chosen cues are then weakly correlated and widely spread, so each
weight is estimated well; the cost is that extreme files are over-represented and
the mix is unlike the season's, so a policy captured on them describes typical
files less directly; on a strongly correlated pool D-optimality spreads the files
along the main axis and keeps much of the correlation. ``representative`` draws a simple random sample: the season's
mix and correlations are kept, and correlated cues inflate the weights' SEs by
sqrt(VIF).

Who reads what
--------------
With ``readers_per_file`` unset every rater reads every chosen file. Otherwise
each file is read by r >= 2 raters, file ``i`` (in a random order) going to raters
``i, i+1, ..., i+r-1`` (mod the number of raters): consecutive raters share files, so
the rater-file network is connected and every rater is comparable with every other.

Hidden repeats
--------------
Each rater gets ``round(repeat_share * their distinct files)`` of their files a
second time, each presentation with its own display code, the two presentations at
least ``min_gap`` positions apart in a per-rater random order. The order is built by
shuffling the first presentations and inserting each repeat at a random position at
least ``min_gap`` from its first showing: an insertion only widens other gaps, so
the construction never fails when the packet is long enough.

Expected SE of a weight
-----------------------
For standardized cues and judgments, :math:`SE(\\beta_j) =
\\sqrt{(1 - R^2)/(n - k - 1)}\\,\\sqrt{VIF_j}`, the ordinary least-squares standard error of a
standardized weight (an exact identity, checked against statsmodels in
``tests/unit/test_design_plan_precision.py``), shown for a
typical rater with R_s = 0.80 (TYPICAL_R_S).

Expected precision of R_s, and the smallest change it could show
-----------------------------------------------------------------
R_s has no simple exact sampling distribution on a fixed design, so the plan simulates
it: for up to ``PRECISION_RATERS`` raters' planned files, judgments ``y = X b + e`` with
equal standardized weights scaled so that the rater's R_s on these files is 0.80, and
normal errors (continuous judgments: rounding to a short scale lowers R_s a little
more), ``PRECISION_DRAWS`` times, each fitted by least squares (one QR of the design,
all draws at once). The expected width of a 95% interval is the median over raters of
the 2.5%-97.5% range of the simulated R_s; the smallest before/after change in R_s this
design could detect for one rater (80% power, 5% two-sided, two phases of this size on
different files) is :math:`(z_{0.975} + z_{0.80})\sqrt{2}\,SD(R_s)`. The simulation is
checked against statsmodels OLS fitted draw by draw (``tests/unit/test_design_plan_precision.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as sps

from ..errors import CalibrateError, DataError, DataProblem
from ..policy.fit import TYPICAL_R_S
from ..result_base import ResultMixin

__all__ = ["CODE_ALPHABET", "METHODS", "RatingPlan", "plan_exercise"]

METHODS = ("uncorrelated", "spread", "representative")
# Letters and digits that cannot be mistaken for one another when copied by hand.
CODE_ALPHABET = "ACDEFGHJKMNPQRTUVWXY3479"
CODE_LENGTH = 6
PRECISION_RATERS = 25      # planned packets simulated for the expected precision of R_s
PRECISION_DRAWS = 2000     # simulated judgment sets per packet


@dataclass(frozen=True)
class RatingPlan(ResultMixin):
    """A planned exercise: the chosen files, each rater's packet, and the design figures."""

    method: str
    seed: int
    cues: tuple[str, ...]
    design_columns: tuple[str, ...]    # numeric cues as they are, categorical ones as cue=level
    cue_kinds: dict[str, str]          # cue -> "numeric" | "categorical"
    files: tuple[str, ...]             # the chosen distinct files
    file_cues: pd.DataFrame            # the chosen files: "file" + cue columns
    key: pd.DataFrame                  # rater, position, display_code, file, showing (1 or 2)
    packets: dict[str, pd.DataFrame]   # rater -> display_code, cues..., judgment (empty)
    correlations_chosen: pd.DataFrame
    correlations_pool: pd.DataFrame
    vif_chosen: dict[str, float]
    vif_pool: dict[str, float]
    expected_se: dict[str, float]      # standardized weight, typical rater
    files_per_weight: float
    rs_interval_width: float           # expected width of a 95% interval of R_s, typical rater
    rs_sd: float                       # its expected sampling SD
    rs_detectable_change: float        # smallest before/after change of R_s detectable (80%, 5%)
    min_gap: int
    repeat_share: float
    readers_per_file: int | None

    def max_abs_correlation(self, chosen: bool = True) -> float:
        corr = (self.correlations_chosen if chosen else self.correlations_pool).to_numpy()
        off = corr[~np.eye(len(corr), dtype=bool)]
        return float(np.max(np.abs(off))) if off.size else 0.0

    def to_frame(self) -> pd.DataFrame:
        """One row per design column (a numeric cue, or a level of a categorical one): VIF
        chosen vs pool, expected SE of its standardized weight."""
        cols = self.design_columns
        return pd.DataFrame({"cue": list(cols),
                             "vif_chosen": [self.vif_chosen[c] for c in cols],
                             "vif_pool": [self.vif_pool[c] for c in cols],
                             "expected_se_std_weight": [self.expected_se[c] for c in cols]})

    def to_dict(self) -> dict:
        return {
            "method": self.method, "seed": self.seed, "cues": list(self.cues), "cue_kinds": dict(self.cue_kinds),
            "design_columns": list(self.design_columns), "files": list(self.files),
            "raters": list(self.packets), "repeat_share": self.repeat_share, "min_gap": self.min_gap,
            "readers_per_file": self.readers_per_file, "files_per_weight": self.files_per_weight,
            "max_abs_correlation": {"chosen": self.max_abs_correlation(True),
                                    "pool": self.max_abs_correlation(False)},
            "correlations_chosen": self.correlations_chosen.to_dict(),
            "correlations_pool": self.correlations_pool.to_dict(),
            "vif_chosen": self.vif_chosen, "vif_pool": self.vif_pool, "expected_se": self.expected_se,
            "typical_r_s": TYPICAL_R_S,
            "expected_r_s_precision": {"interval_width_95": self.rs_interval_width, "sd": self.rs_sd,
                                       "detectable_change": self.rs_detectable_change,
                                       "draws": PRECISION_DRAWS},
        }


def plan_exercise(pool: pd.DataFrame, raters: list[str], files_per_rater: int, *,
                  file_column: str = "file", cues: list[str] | None = None,
                  repeat_share: float = 0.15, readers_per_file: int | None = None,
                  min_gap: int = 5, method: str = "uncorrelated", seed: int = 0,
                  source: str = "the pool") -> RatingPlan:
    """Plan the exercise (see the module doc for every choice and its source).

    Parameters
    ----------
    pool : one row per candidate file: ``file_column`` and numeric cue columns.
    raters : the raters' names (distinct).
    files_per_rater : distinct files each rater reads (repeats come on top).
    cues : the cue columns (default: every column but the file column).
    repeat_share : share of each rater's distinct files shown a second time.
    readers_per_file : None = every rater reads every file; else r >= 2 readers per file.
    min_gap : least distance in positions between a file's two showings.
    method : ``"uncorrelated"`` (largest det of the cue correlations), ``"spread"``
        (D-optimal exchange) or ``"representative"`` (random sample).
    """
    X_pool, ids, cues, columns, kinds, raw = _pool_matrix(pool, file_column, cues, source)
    raters = [str(r) for r in raters]
    _check_plan(raters, files_per_rater, repeat_share, readers_per_file, min_gap, method, len(ids), len(columns))
    rng = np.random.default_rng(seed)
    R = len(raters)
    n_files = files_per_rater if readers_per_file is None else int(np.ceil(R * files_per_rater / readers_per_file))
    if n_files > len(ids):
        raise CalibrateError(f"The plan needs {n_files} distinct files but {source} has only {len(ids)}.")
    if method == "spread":
        chosen = d_optimal_subset(X_pool, n_files, rng)
    elif method == "uncorrelated":
        chosen = uncorrelated_subset(X_pool, n_files, rng)
    else:
        chosen = np.sort(rng.choice(len(ids), n_files, replace=False))
    order = rng.permutation(chosen)
    if readers_per_file is None:
        reads = {r: order for r in raters}
    else:
        reads = {r: [] for r in raters}
        for i, f in enumerate(order):
            for j in range(readers_per_file):
                reads[raters[(i + j) % R]].append(f)
        reads = {r: np.array(v) for r, v in reads.items()}
    key_rows, packets = [], {}
    n_codes = sum(len(v) + int(round(repeat_share * len(v))) for v in reads.values())
    codes = iter(_display_codes(n_codes, rng))
    for rater in raters:
        sequence = _order_with_repeats(reads[rater], int(round(repeat_share * len(reads[rater]))), min_gap, rng)
        seen: set[int] = set()
        rows = []
        for position, f in enumerate(sequence, start=1):
            showing = 2 if f in seen else 1
            seen.add(f)
            code = next(codes)
            key_rows.append({"rater": rater, "position": position, "display_code": code,
                             "file": ids[f], "showing": showing})
            rows.append({"display_code": code, **{c: raw[c][f] for c in cues}, "judgment": None})
        packets[rater] = pd.DataFrame(rows, columns=["display_code", *cues, "judgment"])
    per_rater_X = [X_pool[reads[r]] for r in raters]
    vif_chosen = np.median([_vif(X) for X in per_rater_X], axis=0)
    n_per = np.median([len(v) for v in reads.values()])
    k = len(columns)
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.sqrt((1 - TYPICAL_R_S ** 2) / (n_per - k - 1) * vif_chosen)
    width, sd = expected_rs_precision(per_rater_X[:PRECISION_RATERS], np.random.default_rng([seed, 1]))
    return RatingPlan(
        method=method, seed=seed, cues=tuple(cues), design_columns=tuple(columns), cue_kinds=kinds,
        files=tuple(ids[i] for i in np.sort(chosen)),
        file_cues=pd.DataFrame({"file": [ids[i] for i in np.sort(chosen)],
                                **{c: raw[c][np.sort(chosen)] for c in cues}}),
        key=pd.DataFrame(key_rows), packets=packets,
        correlations_chosen=pd.DataFrame(np.corrcoef(X_pool[chosen], rowvar=False).reshape(k, k),
                                         index=columns, columns=columns),
        correlations_pool=pd.DataFrame(np.corrcoef(X_pool, rowvar=False).reshape(k, k), index=columns, columns=columns),
        vif_chosen=dict(zip(columns, map(float, vif_chosen))), vif_pool=dict(zip(columns, map(float, _vif(X_pool)))),
        expected_se=dict(zip(columns, map(float, se))), files_per_weight=float(n_per / k),
        rs_interval_width=width, rs_sd=sd,
        rs_detectable_change=float((sps.norm.ppf(0.975) + sps.norm.ppf(0.80)) * np.sqrt(2) * sd),
        min_gap=min_gap, repeat_share=repeat_share, readers_per_file=readers_per_file,
    )


def _pool_matrix(pool: pd.DataFrame, file_column: str, cues, source: str):
    """(design matrix, file ids, cue names, design columns, cue kinds, raw cue values).

    A cue whose values are all numbers is numeric; any other cue is categorical and
    enters the design as one 0/1 column per level but the most frequent (ties:
    alphabetical), named ``cue=level`` as in the audit; the packets show its words.
    """
    if file_column not in pool.columns:
        raise DataError([DataProblem(f"No '{file_column}' column naming each file.", file=source, column=file_column)])
    cues = list(cues) if cues else [c for c in pool.columns if c not in (file_column, "_row")]
    problems, blocks, names, kinds, raw = [], [], [], {}, {}
    for c in cues:
        if c not in pool.columns:
            problems.append(DataProblem(f"Cue '{c}' is not a column of the pool.", file=source, column=c))
            continue
        x = pd.to_numeric(pool[c], errors="coerce")
        present = pool[c].notna().to_numpy()
        numeric = bool(present.any()) and bool(x[present].notna().all())
        for i in np.flatnonzero(~present):
            row = int(pool["_row"].iloc[i]) if "_row" in pool.columns else int(i) + 2
            problems.append(DataProblem(f"Cue '{c}' is empty; every file of the pool needs every cue "
                                        "(leave the file out, or the cue via cues).", file=source, row=row, column=c))
        if numeric:
            kinds[c], raw[c] = "numeric", x.to_numpy(dtype=float)
            blocks.append(raw[c][:, None])
            names.append(c)
            continue
        words = pool[c].astype("string").str.strip()
        counts = words.value_counts()
        levels = sorted(counts.index, key=lambda v: (-counts[v], str(v)))
        if len(levels) < 2:
            problems.append(DataProblem(f"Cue '{c}' has one value only; it cannot be a cue.", file=source, column=c))
            continue
        kinds[c], raw[c] = "categorical", words.to_numpy(dtype=object)
        blocks.append(np.column_stack([(words == lvl).fillna(False).to_numpy(dtype=float) for lvl in levels[1:]]))
        names += [f"{c}={lvl}" for lvl in levels[1:]]
    ids = pool[file_column].astype(str).tolist()
    if len(set(ids)) < len(ids):
        problems.append(DataProblem("File ids repeat; each file must appear once in the pool.",
                                    file=source, column=file_column))
    if problems:
        if len(problems) > 20:
            problems = problems[:20] + [DataProblem(f"... and {len(problems) - 20} more like these.", file=source)]
        raise DataError(problems)
    return np.column_stack(blocks), ids, cues, names, kinds, raw


def _check_plan(raters, files_per_rater, repeat_share, readers, min_gap, method, n_pool, k) -> None:
    if len(set(raters)) != len(raters) or not raters:
        raise CalibrateError("Give at least one rater, each name once.")
    if method not in METHODS:
        raise CalibrateError(f"The file choice must be one of {', '.join(METHODS)}; got {method!r}.")
    if not 0 <= repeat_share <= 1:
        raise CalibrateError(f"The share of repeats must be between 0 and 1; got {repeat_share!r}.")
    if files_per_rater < k + 2:
        raise CalibrateError(f"Each rater needs at least {k + 2} files to fit a policy on {k} cues; "
                             f"got {files_per_rater} (ten per cue is a usual minimum).")
    if readers is not None and not 2 <= readers <= len(raters):
        raise CalibrateError(f"Readers per file must be between 2 (to keep the raters linked) and the number "
                             f"of raters, {len(raters)}; got {readers}.")
    if min_gap < 1:
        raise CalibrateError(f"The least distance between repeats must be at least 1; got {min_gap}.")


def d_optimal_subset(X: np.ndarray, n: int, rng: np.random.Generator, max_swaps: int = 10_000) -> np.ndarray:
    """Indices of ``n`` rows of ``X`` chosen by Fedorov's exchange on det(X'X).

    Cues are standardized over the pool and an intercept is added. Each step makes
    the single best swap (vectorized over every in/out pair).
    """
    sd = X.std(axis=0)
    Z = np.column_stack([np.ones(len(X)), (X - X.mean(axis=0)) / np.where(sd > 0, sd, 1.0)])
    inside = np.zeros(len(X), dtype=bool)
    inside[rng.choice(len(X), n, replace=False)] = True
    for _ in range(max_swaps):
        M = Z[inside].T @ Z[inside]
        try:
            M_inv = np.linalg.inv(M + 1e-9 * np.eye(len(M)))
        except np.linalg.LinAlgError:  # pragma: no cover - the ridge keeps M invertible
            break
        A, B = np.flatnonzero(inside), np.flatnonzero(~inside)
        if B.size == 0:
            break
        ZA_M = Z[A] @ M_inv
        d_a = np.einsum("ij,ij->i", ZA_M, Z[A])
        d_b = np.einsum("ij,jk,ik->i", Z[B], M_inv, Z[B])
        d_ab = ZA_M @ Z[B].T
        ratio = (1 - d_a)[:, None] * (1 + d_b)[None, :] + d_ab ** 2
        best = np.unravel_index(np.argmax(ratio), ratio.shape)
        if ratio[best] <= 1 + 1e-10:
            break
        inside[A[best[0]]], inside[B[best[1]]] = False, True
    return np.flatnonzero(inside)


def uncorrelated_subset(X: np.ndarray, n: int, rng: np.random.Generator, max_swaps: int = 2_000) -> np.ndarray:
    """Indices of ``n`` rows of ``X`` whose cue correlation matrix has the largest determinant.

    Exchange: each step evaluates every (chosen, pool) swap at once from the
    running sums and cross-products, and makes the best one while it gains.
    """
    k = X.shape[1]
    inside = np.zeros(len(X), dtype=bool)
    inside[rng.choice(len(X), n, replace=False)] = True
    outer = np.einsum("ni,nj->nij", X, X)
    current = -np.inf
    for _ in range(max_swaps):
        A, B = np.flatnonzero(inside), np.flatnonzero(~inside)
        if B.size == 0 or k < 2:
            break
        s1 = X[A].sum(axis=0)
        s2 = outer[A].sum(axis=0)
        s1_new = s1 - X[A][:, None, :] + X[B][None, :, :]                  # (a, b, k)
        s2_new = s2 - outer[A][:, None] + outer[B][None, :]                # (a, b, k, k)
        cov = s2_new - np.einsum("abi,abj->abij", s1_new, s1_new) / n
        var = np.einsum("abii->abi", cov)
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.sqrt(var[..., :, None] * var[..., None, :])
            score = np.where((var > 0).all(axis=-1), np.linalg.slogdet(np.nan_to_num(corr))[1], -np.inf)
        best = np.unravel_index(np.argmax(score), score.shape)
        if not score[best] > current + 1e-10:
            break
        current = score[best]
        inside[A[best[0]]], inside[B[best[1]]] = False, True
    return np.flatnonzero(inside)


def simulated_rs(X: np.ndarray, rng: np.random.Generator, *, r_s: float = TYPICAL_R_S,
                 draws: int = PRECISION_DRAWS) -> np.ndarray:
    """R_s of ``draws`` simulated raters on the files ``X`` (module doc): equal standardized
    weights scaled so that R_s = ``r_s`` on these files, normal errors, least squares."""
    n, k = X.shape
    sd = X.std(axis=0)
    Z = (X - X.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
    signal = Z.sum(axis=1)
    signal = signal / signal.std() * r_s if signal.std() > 0 else signal
    Y = signal[:, None] + rng.standard_normal((n, draws)) * np.sqrt(1 - r_s ** 2)
    Q, _ = np.linalg.qr(np.column_stack([np.ones(n), Z]))
    fitted = Q @ (Q.T @ Y)
    centred = Y - Y.mean(axis=0)
    rss = ((Y - fitted) ** 2).sum(axis=0)
    return np.sqrt(np.clip(1 - rss / (centred ** 2).sum(axis=0), 0, 1))


def expected_rs_precision(designs: list[np.ndarray], rng: np.random.Generator) -> tuple[float, float]:
    """(median 95% range width, median SD) of R_s over the planned packets (module doc)."""
    widths, sds = [], []
    for X in designs:
        if len(X) <= X.shape[1] + 1:
            continue
        r = simulated_rs(X, rng)
        low, high = np.quantile(r, [0.025, 0.975])
        widths.append(high - low)
        sds.append(r.std(ddof=1))
    if not widths:
        return float("nan"), float("nan")
    return float(np.median(widths)), float(np.median(sds))


def _vif(X: np.ndarray) -> np.ndarray:
    corr = np.atleast_2d(np.corrcoef(X, rowvar=False))
    with np.errstate(invalid="ignore"):
        try:
            return np.diag(np.linalg.inv(corr))
        except np.linalg.LinAlgError:
            return np.full(len(corr), np.inf)


def _display_codes(n: int, rng: np.random.Generator) -> list[str]:
    base = len(CODE_ALPHABET)
    numbers = rng.choice(base ** CODE_LENGTH, n, replace=False)
    out = []
    for v in numbers:
        chars = []
        for _ in range(CODE_LENGTH):
            v, r = divmod(int(v), base)
            chars.append(CODE_ALPHABET[r])
        out.append("".join(chars))
    return out


def _order_with_repeats(files: np.ndarray, n_repeats: int, min_gap: int, rng: np.random.Generator) -> list[int]:
    sequence = [int(f) for f in rng.permutation(files)]
    for f in rng.choice(sequence, n_repeats, replace=False) if n_repeats else []:
        first = sequence.index(int(f))
        # insertion slot s puts the copy at index s; it must be >= min_gap from the first showing
        slots = [s for s in range(len(sequence) + 1) if s >= first + min_gap or s <= first - min_gap]
        if not slots:
            raise CalibrateError(f"A packet of {len(files)} files cannot keep repeats {min_gap} positions apart; "
                                 "lower the distance or give each rater more files.")
        sequence.insert(int(rng.choice(slots)), int(f))
    return sequence
