"""REFERENCE ONLY: the dense n x n path, for tests (n up to a few hundred).

Builds the Brownian covariance matrix C explicitly with NumPy and computes
every quantity by its textbook matrix formula, so the linear-time pass can
be checked against it. Nothing in the library calls this module; it costs
O(n^2) memory and O(n^3) time.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg
from scipy.stats import multivariate_normal

from curation.diagnostics.pruning import PreparedTree

__all__ = [
    "dense_covariance",
    "dense_lambda_covariance",
    "dense_gls_mean",
    "dense_loglik_ml",
    "dense_loglik_reml",
    "dense_blomberg_k",
]


def dense_covariance(tree: PreparedTree) -> np.ndarray:
    """C[i, j] = length of the path shared by tips i and j from the root
    (tips in label order): A diag(t) A' with A the tip-by-node ancestry
    indicator."""
    n = tree.node_count
    ancestry = np.zeros((tree.tip_count, n))
    for row, node in enumerate(tree.tip_nodes):
        v = int(node)
        while v > 0:
            ancestry[row, v] = 1.0
            v = int(tree.parent[v])
    return ancestry @ np.diag(tree.length) @ ancestry.T


def dense_lambda_covariance(c: np.ndarray, lam: float) -> np.ndarray:
    """Pagel's (1999) lambda: off-diagonal elements multiplied by lambda."""
    out = lam * c
    np.fill_diagonal(out, np.diag(c))
    return out


def dense_gls_mean(v: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """GLS root state (1'V^-1 1)^-1 1'V^-1 y and 1'V^-1 1, by numpy.linalg.solve."""
    ones = np.ones(len(y))
    vinv_1 = np.linalg.solve(v, ones)
    precision = float(ones @ vinv_1)
    return float(vinv_1 @ y) / precision, precision


def dense_loglik_ml(v: np.ndarray, y: np.ndarray, mean: float) -> float:
    """log N(y; mean 1, V) by scipy.stats.multivariate_normal.logpdf."""
    return float(multivariate_normal.logpdf(y, mean=np.full(len(y), mean), cov=v))


def dense_loglik_reml(v: np.ndarray, y: np.ndarray) -> float:
    """Restricted log-likelihood: the density of n-1 orthonormal error
    contrasts K'y (K'1 = 0, K'K = I; Patterson and Thompson 1971), by
    scipy.linalg.null_space and multivariate_normal.logpdf."""
    k = linalg.null_space(np.ones((1, len(y))))
    return float(multivariate_normal.logpdf(k.T @ y, mean=np.zeros(k.shape[1]), cov=k.T @ v @ k))


def dense_blomberg_k(v: np.ndarray, y: np.ndarray) -> float:
    """Blomberg, Garland and Ives (2003), their equations: K = (MSE0 / MSE)
    divided by its Brownian expectation (tr V - n / 1'V^-1 1) / (n - 1),
    where MSE0 uses the GLS mean and MSE the GLS residuals' V^-1 form."""
    n = len(y)
    mean, precision = dense_gls_mean(v, y)
    r = y - mean
    mse0 = float(r @ r) / (n - 1)
    mse = float(r @ np.linalg.solve(v, r)) / (n - 1)
    expected = (np.trace(v) - n / precision) / (n - 1)
    return (mse0 / mse) / expected
