"""A rater's straight-line policy seen through the judgment scale, for parametric-bootstrap nulls.

Tests that ask "is this rater's policy a straight line?" (the curvature test in
:mod:`.diagnostics`, the cut-off check in ``lens/cutoffs.py``) compare a statistic with
its distribution under the rater's own fitted straight-line policy. On a continuous
scale that policy is a least-squares line with normal errors. On a scale in whole steps
with ends, rounding and the ends bend a straight line, so the null is a straight-line
*latent* policy drawn, rounded and clipped exactly as the scale does. On 0/1 decisions
it is a straight line in log-odds passed through Bernoulli draws.

Every fit is batched over raters (rows of all raters in one array, a group index per
row, rows sorted by group); drawing is batched over raters and simulations.

References
----------
.. [1] Aitchison, J., & Silvey, S. D. (1957). The generalization of probit analysis to
       the case of multiple responses. Biometrika, 44, 131-140.
.. [2] Tobin, J. (1958). Estimation of relationships for limited dependent variables.
       Econometrica, 26, 24-36.
.. [3] Berndt, E. K., Hall, B. H., Hall, R. E., & Hausman, J. A. (1974). Estimation and
       inference in nonlinear structural models. Annals of Economic and Social
       Measurement, 3, 653-665.
.. [4] Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap, ch. 16.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from .linalg import grouped_products, grouped_sscp, ols_from_sscp
from .logistic import fit_logistic

NULL_KINDS = ("continuous", "rounded", "binary")


@dataclass(frozen=True)
class RoundedNormalPolicy:
    """Per group: a straight-line latent policy seen through rounding and the scale ends.

    The judgment is ``clip(round(b0 + x'b + sigma * z), scale_min, scale_max)`` in steps of
    ``step``: an interval-censored normal regression (the ordered-probit model with its
    thresholds fixed at the half-steps of the scale; Aitchison & Silvey 1957 for ordered
    probit; Tobin 1958 for the censored ends), fitted by maximum likelihood.
    """

    intercept: np.ndarray   # (G,)
    coef: np.ndarray        # (G, p)
    sigma: np.ndarray       # (G,)
    converged: np.ndarray   # (G,) bool


_SQRT_2PI = np.sqrt(2.0 * np.pi)


def _normal_pdf(x: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        return np.exp(-x**2 / 2.0) / _SQRT_2PI


def fit_rounded_normal(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int, *,
                       scale_min: float, scale_max: float, step: float = 1.0,
                       iterations: int = 60) -> RoundedNormalPolicy:
    """Maximum-likelihood interval-censored normal policy for every group at once.

    Newton steps with the outer product of the row scores as the curvature (Berndt, Hall,
    Hall & Hausman 1974), halved when they would lower a group's likelihood; started from
    least squares. Batched: no loop over groups.

    A rater whose straight line runs inside every judgment's rounding interval has no
    finite maximum (the likelihood rises as sigma falls to 0), so sigma is held at or
    above a thousandth of a step: the null then draws that rater's judgments exactly as
    given, and nothing divides by zero.
    """
    m, p = X.shape
    log_sigma_floor = np.log(1e-3 * step)
    W = np.column_stack([np.ones(m), X])
    q = p + 1
    lower = np.where(y <= scale_min + 1e-9, -np.inf, y - step / 2.0)
    upper = np.where(y >= scale_max - 1e-9, np.inf, y + step / 2.0)
    start = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, n_groups), np.arange(p), p)
    theta = np.column_stack([start.intercept, start.coef,
                             np.log(np.sqrt(np.maximum(start.rss / start.n, 1e-4)))])
    theta = np.where(np.isfinite(theta), theta, 0.0)

    def loglik_and_scores(th):
        mu = np.einsum("mq,mq->m", W, th[groups, :q])
        sigma = np.exp(th[groups, q])
        a, b = (lower - mu) / sigma, (upper - mu) / sigma
        # The normal cdf and pdf as scipy.stats computes them (ndtr; exp(-x^2/2)/sqrt(2 pi)),
        # without its argument checks, which cost more than the values here.
        prob = np.maximum(special.ndtr(b) - special.ndtr(a), 1e-300)
        pdf_a, pdf_b = _normal_pdf(a), _normal_pdf(b)
        with np.errstate(invalid="ignore"):  # inf * 0 at the open ends, set to 0 below
            a_pdf, b_pdf = a * pdf_a, b * pdf_b
        a_pdf[~np.isfinite(a)] = 0.0
        b_pdf[~np.isfinite(b)] = 0.0
        d_mu = (pdf_a - pdf_b) / (sigma * prob)
        d_log_sigma = (a_pdf - b_pdf) / prob
        scores = np.column_stack([d_mu[:, None] * W, d_log_sigma])
        ll = np.bincount(groups, weights=np.log(prob), minlength=n_groups)
        return ll, scores

    ll, scores = loglik_and_scores(theta)
    converged = np.zeros(n_groups, dtype=bool)
    eye = np.eye(q + 1)
    for _ in range(iterations):
        grad, outer = grouped_products(scores, groups, n_groups)
        outer += 1e-9 * eye
        direction = np.linalg.solve(outer, grad[..., None])[..., 0]
        converged = np.einsum("gi,gi->g", grad, direction) < 1e-10
        shrink = np.ones(n_groups)
        for _halving in range(8):
            trial = theta + shrink[:, None] * direction
            trial[:, q] = np.maximum(trial[:, q], log_sigma_floor)
            trial_ll, trial_scores = loglik_and_scores(trial)
            better = (trial_ll >= ll - 1e-12) | converged
            if better.all():
                break
            shrink = np.where(better, shrink, shrink / 2.0)
        accept = trial_ll >= ll - 1e-12
        theta = np.where(accept[:, None], trial, theta)
        ll, scores = loglik_and_scores(theta)
        if converged.all():
            break
    return RoundedNormalPolicy(intercept=theta[:, 0], coef=theta[:, 1:q],
                               sigma=np.exp(theta[:, q]), converged=converged)


def whole_step_bounds(y: np.ndarray, scale: str, scale_min: float | None,
                      scale_max: float | None) -> tuple[float, float] | None:
    """(min, max) of an ordinal scale whose judgments all sit on whole steps; else None.

    Only such a scale is rounded to whole steps, so only there does the rounded null apply.
    """
    if scale != "ordinal" or scale_min is None or scale_max is None:
        return None
    finite = y[np.isfinite(y)]
    whole = np.allclose(finite - scale_min, np.round(finite - scale_min))
    return (float(scale_min), float(scale_max)) if whole and scale_max > scale_min else None


@dataclass(frozen=True)
class LinearNull:
    """Each row's straight-line policy under the scale, ready to draw judgment sets from.

    ``kind`` is "continuous" (``mean + sigma z``), "rounded" (the same, rounded to
    ``step`` and clipped to ``[scale_min, scale_max]``) or "binary" (1 with probability
    ``prob``). ``mean``, ``sigma`` and ``prob`` hold one value per row (NaN where unused).
    ``usable`` is False on the rows of a group whose fit gives no null to draw from: a
    parameter that is not finite, or 0/1 decisions that the cues separate (the logistic
    weights run off to infinity and every draw repeats the observed decisions).
    """

    kind: str
    mean: np.ndarray
    sigma: np.ndarray
    prob: np.ndarray
    usable: np.ndarray
    scale_min: float = float("nan")
    scale_max: float = float("nan")
    step: float = 1.0

    def draw(self, rng: np.random.Generator, size: int, rows=slice(None)) -> np.ndarray:
        """``(size, n_rows)`` simulated judgments of the selected rows."""
        if self.kind == "binary":
            prob = self.prob[rows]
            return (rng.random((size, prob.size)) < prob).astype(float)
        mean, sigma = self.mean[rows], self.sigma[rows]
        latent = mean + sigma * rng.standard_normal((size, mean.size))
        if self.kind == "continuous":
            return latent
        lo = self.scale_min
        return np.clip(lo + self.step * np.round((latent - lo) / self.step), lo, self.scale_max)


def fit_linear_null(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int, *,
                    kind: str, scale_min: float | None = None, scale_max: float | None = None,
                    step: float = 1.0) -> LinearNull:
    """Fit every group's straight-line policy for the null of ``kind`` (rows sorted by group).

    "continuous": least squares, ``sigma^2 = RSS / (n - p - 1)``; "rounded":
    :func:`fit_rounded_normal`; "binary": logistic regression (``y`` in 0/1;
    :func:`.logistic.fit_logistic`).
    """
    if kind not in NULL_KINDS:
        raise ValueError(f"kind must be one of {NULL_KINDS}; got {kind!r}.")
    m, p = X.shape
    nan = np.full(m, np.nan)
    if kind == "binary":
        fit = fit_logistic(X, y, groups, n_groups)
        eta = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
        usable = np.isfinite(eta) & ~fit.separation[groups]
        return LinearNull("binary", nan, nan, special.expit(eta), usable)
    if kind == "rounded":
        fit = fit_rounded_normal(X, y, groups, n_groups, scale_min=scale_min,
                                 scale_max=scale_max, step=step)
        mean = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
        sigma = fit.sigma[groups]
        return LinearNull("rounded", mean, sigma, nan, np.isfinite(mean) & np.isfinite(sigma),
                          float(scale_min), float(scale_max), float(step))
    fit = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, n_groups), np.arange(p), p)
    mean = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
    sigma = np.sqrt(fit.sigma2)[groups]
    return LinearNull("continuous", mean, sigma, nan, np.isfinite(mean) & np.isfinite(sigma))
