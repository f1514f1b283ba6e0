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

from dataclasses import dataclass, replace

import numpy as np
from scipy import special

from .linalg import grouped_sscp, ols_from_sscp, padded_layout
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
                       iterations: int = 60, tol: float = 1e-10) -> RoundedNormalPolicy:
    """Maximum-likelihood interval-censored normal policy for every group at once.

    Newton steps on the exact second derivatives of the log-likelihood, in ``(b0, b,
    log sigma)``; where that matrix is not negative definite (far from the maximum), the
    outer product of the row scores serves instead (Berndt, Hall, Hall & Hausman 1974).
    A step is halved while it would lower a group's likelihood; started from least
    squares. A group stops once its Newton decrement ``g' H^-1 g`` is under ``tol``, and
    later iterations touch only the groups still moving (the rows sit in a padded
    (groups, longest) block, laid out once). Batched: no loop over groups.

    A rater whose straight line runs inside every judgment's rounding interval has no
    finite maximum (the likelihood rises as sigma falls to 0), so sigma is held at or
    above a thousandth of a step: the null then draws that rater's judgments exactly as
    given, and nothing divides by zero.
    """
    m, p = X.shape
    q = p + 1
    log_sigma_floor = np.log(1e-3 * step)
    start = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, n_groups), np.arange(p), p)
    theta = np.column_stack([start.intercept, start.coef,
                             np.log(np.sqrt(np.maximum(start.rss / start.n, 1e-4)))])
    theta = np.where(np.isfinite(theta), theta, 0.0)
    rows = _RowBlocks(np.column_stack([np.ones(m), X]), y, groups, n_groups,
                      scale_min=scale_min, scale_max=scale_max, step=step)
    converged = np.zeros(n_groups, dtype=bool)
    active = np.arange(n_groups)
    ll, grad, hess = rows.loglik(theta, active, derivatives=True)
    eye = np.eye(q + 1)
    for _ in range(iterations):
        direction, decrement = _ascent_direction(grad, hess, eye)
        done = decrement < tol
        shrink = np.ones(active.size)
        pending = np.arange(active.size)
        trial = theta[active] + direction
        trial[:, q] = np.maximum(trial[:, q], log_sigma_floor)
        trial_ll = rows.loglik(trial, active)[0]
        for _halving in range(8):
            worse = pending[(trial_ll[pending] < ll[pending] - 1e-12) & ~done[pending]]
            if worse.size == 0:
                break
            shrink[worse] /= 2.0
            trial[worse] = theta[active[worse]] + shrink[worse, None] * direction[worse]
            trial[worse, q] = np.maximum(trial[worse, q], log_sigma_floor)
            trial_ll[worse] = rows.loglik(trial[worse], active[worse])[0]
            pending = worse
        accept = trial_ll >= ll - 1e-12
        theta[active[accept]] = trial[accept]
        converged[active[done]] = True
        moving = ~done & accept
        active = active[moving]
        if active.size == 0:
            break
        ll, grad, hess = rows.loglik(theta[active], active, derivatives=True)
    return RoundedNormalPolicy(intercept=theta[:, 0], coef=theta[:, 1:q],
                               sigma=np.exp(theta[:, q]), converged=converged)


def _ascent_direction(grad, hess, eye):
    """Newton direction ``-H^-1 g`` where ``-H`` is positive definite, else the BHHH one."""
    second, scores = hess
    info = -second
    definite = np.linalg.eigvalsh(info)[:, 0] > 1e-10 * np.maximum(np.abs(np.einsum("gii->g", info)), 1e-300)
    curvature = info.copy()
    if not definite.all():
        # the outer product of the row scores, only where it is used
        far = np.flatnonzero(~definite)
        curvature[far] = np.matmul(np.swapaxes(scores[far], 1, 2), scores[far]) + 1e-9 * eye
    direction = np.linalg.solve(curvature, grad[..., None])[..., 0]
    return direction, np.einsum("gi,gi->g", grad, direction)


class _RowBlocks:
    """Rows of every group as a padded (groups, longest) block, for the likelihood sums.

    Padding slots get the interval (-inf, inf): probability 1, every derivative 0, so they
    add exact zeros to the sums.
    """

    def __init__(self, W, y, groups, n_groups, *, scale_min, scale_max, step):
        q = W.shape[1]
        order, g_sorted, slot, _, longest = padded_layout(groups, n_groups)
        longest = max(longest, 1)
        self.W = np.zeros((n_groups, longest, q))
        self.W[g_sorted, slot] = W[order]
        self.lower = np.full((n_groups, longest), -np.inf)
        self.upper = np.full((n_groups, longest), np.inf)
        ys = y[order]
        self.lower[g_sorted, slot] = np.where(ys <= scale_min + 1e-9, -np.inf, ys - step / 2.0)
        self.upper[g_sorted, slot] = np.where(ys >= scale_max - 1e-9, np.inf, ys + step / 2.0)

    def loglik(self, theta, which, derivatives=False):
        """Log-likelihood of groups ``which`` at ``theta`` (len(which), q + 1); with
        ``derivatives`` also the gradient and ``(hessian, row scores)`` (the scores'
        outer product is the BHHH curvature, formed where the hessian is not used)."""
        W = self.W[which]
        q = W.shape[2]
        mu = np.matmul(W, theta[:, :q, None])[..., 0]
        sigma = np.exp(theta[:, q])[:, None]
        a, b = (self.lower[which] - mu) / sigma, (self.upper[which] - mu) / sigma
        # The normal cdf and pdf as scipy.stats computes them (ndtr; exp(-x^2/2)/sqrt(2 pi)),
        # without its argument checks, which cost more than the values here.
        prob = np.maximum(special.ndtr(b) - special.ndtr(a), 1e-300)
        ll = np.log(prob).sum(axis=1)
        if not derivatives:
            return ll, None, None
        pdf_a, pdf_b = _normal_pdf(a), _normal_pdf(b)
        a, b = np.where(np.isfinite(a), a, 0.0), np.where(np.isfinite(b), b, 0.0)  # a^k pdf(a) -> 0
        a_pdf, b_pdf = a * pdf_a, b * pdf_b
        d_mu = (pdf_a - pdf_b) / (sigma * prob)
        d_log_sigma = (a_pdf - b_pdf) / prob
        # second derivatives of the probability, divided by it
        p_mumu = (a_pdf - b_pdf) / (sigma * sigma * prob)
        p_mus = (-(pdf_a - pdf_b) + a * a_pdf - b * b_pdf) / (sigma * prob)
        p_ss = (-(a_pdf - b_pdf) + a * a * a_pdf - b * b * b_pdf) / prob
        h_mumu = p_mumu - d_mu * d_mu
        h_mus = p_mus - d_mu * d_log_sigma
        h_ss = p_ss - d_log_sigma * d_log_sigma
        Wt = np.swapaxes(W, 1, 2)
        scores = np.concatenate([d_mu[..., None] * W, d_log_sigma[..., None]], axis=2)
        grad = scores.sum(axis=1)
        G = W.shape[0]
        hess = np.empty((G, q + 1, q + 1))
        hess[:, :q, :q] = np.matmul(Wt * h_mumu[:, None, :], W)
        hess[:, :q, q] = hess[:, q, :q] = np.matmul(Wt, h_mus[..., None])[..., 0]
        hess[:, q, q] = h_ss.sum(axis=1)
        return ll, grad, (hess, scores)


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

    def of_rows(self, rows: np.ndarray) -> "LinearNull":
        """The same null for the selected rows only (a mask or indices)."""
        return replace(self, mean=self.mean[rows], sigma=self.sigma[rows], prob=self.prob[rows],
                       usable=self.usable[rows])

    def draw(self, rng: np.random.Generator, size: int, rows=slice(None)) -> np.ndarray:
        """``(size, n_rows)`` simulated judgments of the selected rows."""
        if self.kind == "binary":
            prob = self.prob[rows]
            return (rng.random((size, prob.size)) < prob).astype(float)
        mean, sigma = self.mean[rows], self.sigma[rows]
        # in place, in the order of mean + sigma * z and lo + step * round((latent - lo) / step)
        latent = rng.standard_normal((size, mean.size))
        latent *= sigma
        latent += mean
        if self.kind == "continuous":
            return latent
        lo = self.scale_min
        latent -= lo
        if self.step != 1.0:
            latent /= self.step
        np.round(latent, out=latent)
        if self.step != 1.0:
            latent *= self.step
        latent += lo
        return np.clip(latent, lo, self.scale_max, out=latent)


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
