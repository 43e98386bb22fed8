"""Brownian-motion fits through the linear pass: the phylogenetic mean, the
rate, the log-likelihoods, and Pagel's lambda, with and without
measurement error.

Conventions (y ~ N(mu 1, V), V = rate * C (+ diag(se^2))):

- ML log-likelihood: log N(y; mu_hat 1, V) at the maximum over mu and rate.
- REML log-likelihood: the density of n - 1 orthonormal error contrasts
  (Patterson and Thompson 1971), i.e.
  -1/2 [(n-1) log 2 pi + log det V + log 1'V^-1 1 - log n + r'V^-1 r].
- Without measurement error the REML rate is the mean square of the
  standardised independent contrasts, r'C^-1 r / (n - 1) (Felsenstein
  1985), and the ML rate is r'C^-1 r / n.
- The standard error of the phylogenetic mean is sqrt(rate_REML / 1'C^-1 1),
  as generalised least squares reports it.
"""

from __future__ import annotations

import math

import numpy as np
from pydantic import BaseModel
from scipy.optimize import minimize_scalar
from scipy.stats import chi2

from curation.diagnostics.likelihood import BrownianPass, edge_variances
from curation.diagnostics.pruning import PreparedTree

__all__ = [
    "BrownianFit",
    "LambdaFit",
    "fit_brownian",
    "fit_lambda",
    "lambda_loglik",
    "brownian_loglik",
]

_LOG_2PI = math.log(2 * math.pi)


class BrownianFit(BaseModel):
    """The Brownian model fitted to one trait."""

    tips: int
    mean: float
    mean_se: float
    rate_reml: float
    rate_ml: float
    loglik_ml: float
    loglik_reml: float
    measurement_error: bool


class LambdaFit(BaseModel):
    """Pagel's lambda (Pagel 1999) by maximum likelihood on [0, 1], with
    likelihood-ratio tests (chi-squared, one degree of freedom)."""

    lam: float
    rate: float
    loglik: float
    loglik_at_0: float
    loglik_at_1: float
    lr_vs_0: float
    p_vs_0: float
    lr_vs_1: float
    p_vs_1: float
    measurement_error: bool


def _ml_no_error(n: int, rss: float, log_det: float) -> tuple[float, float]:
    rate = rss / n
    return -0.5 * (n * (_LOG_2PI + math.log(rate)) + log_det + n), rate


def brownian_loglik(
    tree: PreparedTree, y: np.ndarray, se2: np.ndarray | None, lam: float, rate: float
) -> tuple[float, float, BrownianPass, float]:
    """Return (ML log-likelihood at the GLS mean, REML log-likelihood, the
    pass, the GLS mean) at one rate and lambda, with species' squared SEs
    ``se2`` (or none) added to the terminal branches."""
    n = len(y)
    bp = BrownianPass(tree, edge_variances(tree, lam=lam, rate=rate, tip_variance=se2))
    mean, rss = bp.solve(y)
    ml = -0.5 * (n * _LOG_2PI + bp.log_det + rss[0])
    reml = -0.5 * (
        (n - 1) * _LOG_2PI + bp.log_det + math.log(bp.precision_sum) - math.log(n) + rss[0]
    )
    return ml, reml, bp, float(mean[0])


def _best_rate(
    tree: PreparedTree, y: np.ndarray, se2: np.ndarray, lam: float, start: float, which: int
) -> tuple[float, float]:
    """Maximise the ML (which=0) or REML (which=1) log-likelihood over the
    rate with the species' SE fixed; returns (rate, loglik)."""
    centre = math.log(max(start, 1e-300))

    def negative(log_rate: float) -> float:
        return -brownian_loglik(tree, y, se2, lam, math.exp(log_rate))[which]

    result = minimize_scalar(
        negative, bounds=(centre - 25.0, centre + 5.0), method="bounded", options={"xatol": 1e-7}
    )
    return math.exp(float(result.x)), -float(result.fun)


def fit_brownian(tree: PreparedTree, y: np.ndarray, *, se: np.ndarray | None = None) -> BrownianFit:
    """Fit Brownian motion to the values ``y`` (one per tip, label order).

    Without ``se`` everything comes from one linear pass; with ``se``
    (species standard errors, added as variances to the terminal branches)
    the rate is found by a bounded one-dimensional search, the mean and
    its SE come from V = rate_REML * C + diag(se^2).

    Returns:
        :class:`BrownianFit`.
    """
    n = len(y)
    bp = BrownianPass(tree, edge_variances(tree))
    mean, rss = bp.solve(y)
    rate_reml = float(rss[0]) / (n - 1)
    loglik_ml, rate_ml = _ml_no_error(n, float(rss[0]), bp.log_det)
    loglik_reml = -0.5 * (
        (n - 1) * (_LOG_2PI + math.log(rate_reml))
        + bp.log_det
        + math.log(bp.precision_sum)
        - math.log(n)
        + (n - 1)
    )
    if se is None:
        return BrownianFit(
            tips=n,
            mean=float(mean[0]),
            mean_se=math.sqrt(rate_reml / bp.precision_sum),
            rate_reml=rate_reml,
            rate_ml=rate_ml,
            loglik_ml=loglik_ml,
            loglik_reml=loglik_reml,
            measurement_error=False,
        )
    se2 = np.asarray(se, dtype=np.float64) ** 2
    rate_ml, loglik_ml = _best_rate(tree, y, se2, 1.0, rate_ml, 0)
    rate_reml, loglik_reml = _best_rate(tree, y, se2, 1.0, rate_reml, 1)
    _, _, bp_e, mean_e = brownian_loglik(tree, y, se2, 1.0, rate_reml)
    return BrownianFit(
        tips=n,
        mean=mean_e,
        mean_se=math.sqrt(1.0 / bp_e.precision_sum),
        rate_reml=rate_reml,
        rate_ml=rate_ml,
        loglik_ml=loglik_ml,
        loglik_reml=loglik_reml,
        measurement_error=True,
    )


def lambda_loglik(
    tree: PreparedTree, y: np.ndarray, lam: float, *, se: np.ndarray | None = None
) -> tuple[float, float]:
    """Profile ML log-likelihood of Pagel's lambda at ``lam`` (mean and rate
    maximised); returns (loglik, rate)."""
    n = len(y)
    bp = BrownianPass(tree, edge_variances(tree, lam=lam))
    _, rss = bp.solve(y)
    loglik, rate = _ml_no_error(n, float(rss[0]), bp.log_det)
    if se is None:
        return loglik, rate
    se2 = np.asarray(se, dtype=np.float64) ** 2
    rate, loglik = _best_rate(tree, y, se2, lam, rate, 0)
    return loglik, rate


def fit_lambda(tree: PreparedTree, y: np.ndarray, *, se: np.ndarray | None = None) -> LambdaFit:
    """Maximum-likelihood Pagel's lambda on [0, 1] (Pagel 1999).

    The profile likelihood is evaluated on a grid (11 points, 6 with
    measurement error) and refined by a bounded scalar search around the
    best grid point, so a surface with two peaks is not followed into the
    lesser one. Likelihood-ratio tests against lambda = 0 and lambda = 1
    use the chi-squared distribution with one degree of freedom (common
    practice; the null at a bound of [0, 1] makes them conservative).

    Returns:
        :class:`LambdaFit`.
    """
    grid = np.linspace(0.0, 1.0, 6 if se is not None else 11)
    values = [lambda_loglik(tree, y, float(g), se=se) for g in grid]
    logliks = np.array([v[0] for v in values])
    best = int(np.argmax(logliks))
    low = float(grid[max(best - 1, 0)])
    high = float(grid[min(best + 1, len(grid) - 1)])
    result = minimize_scalar(
        lambda lam: -lambda_loglik(tree, y, float(lam), se=se)[0],
        bounds=(low, high),
        method="bounded",
        options={"xatol": 1e-5},
    )
    lam, loglik = float(result.x), -float(result.fun)
    if logliks[best] >= loglik:
        lam, loglik = float(grid[best]), float(logliks[best])
    rate = lambda_loglik(tree, y, lam, se=se)[1]
    at_0, at_1 = float(logliks[0]), float(logliks[-1])
    lr0 = max(0.0, 2.0 * (loglik - at_0))
    lr1 = max(0.0, 2.0 * (loglik - at_1))
    return LambdaFit(
        lam=lam,
        rate=rate,
        loglik=loglik,
        loglik_at_0=at_0,
        loglik_at_1=at_1,
        lr_vs_0=lr0,
        p_vs_0=float(chi2.sf(lr0, 1)),
        lr_vs_1=lr1,
        p_vs_1=float(chi2.sf(lr1, 1)),
        measurement_error=se is not None,
    )
