"""Blomberg's K (Blomberg, Garland and Ives 2003) in linear time, with a
seeded permutation test.

K = (MSE0 / MSE) / E_BM[MSE0 / MSE], where, with a_hat the GLS mean,
MSE0 = sum (y - a_hat)^2 / (n-1), MSE = (y - a_hat)'V^-1 (y - a_hat) / (n-1)
and the Brownian expectation of the ratio is (tr V - n / 1'V^-1 1) / (n - 1).
All three come from one linear pass (tr V is the sum of root-to-tip
variances). Permutations shuffle the values over the tips and go through
the same pass as matrix columns, chunk by chunk.

The p-value is (1 + number of permutations with K >= observed K) /
(1 + permutations) (common practice for permutation tests; it is never 0).
With measurement error, V = C + diag(se^2) / rate (Ives, Midford and
Garland 2007, from memory) with the rate estimated once; the values are
permuted and their SEs stay with the tips.
"""

from __future__ import annotations

import numpy as np
from pydantic import BaseModel

from curation.diagnostics.likelihood import BrownianPass, edge_variances
from curation.diagnostics.pruning import PreparedTree

__all__ = ["SignalK", "blomberg_k"]

_PERMUTATION_CHUNK = 100


class SignalK(BaseModel):
    """Blomberg's K with its permutation test."""

    k: float
    observed_ratio: float
    expected_ratio: float
    p_value: float | None
    permutations: int
    seed: int
    measurement_error: bool


def blomberg_k(
    tree: PreparedTree,
    y: np.ndarray,
    *,
    tip_variance: np.ndarray | None = None,
    permutations: int = 1000,
    seed: int = 0,
) -> SignalK:
    """Return Blomberg's K of the values ``y`` (tips in label order).

    Args:
        tip_variance: squared species SEs divided by the Brownian rate,
            added to the terminal branches (the measurement-error variant).
        permutations: number of random permutations for the p-value (0 for
            none).
        seed: seed of the permutations (NumPy's default generator); the
            same seed gives the same p-value whatever the chunking.
    """
    n = len(y)
    bp = BrownianPass(tree, edge_variances(tree, tip_variance=tip_variance))
    # Centring changes nothing in K and keeps the sums of squares exact.
    centred = np.asarray(y, dtype=np.float64) - float(np.mean(y))
    expected = (bp.trace - n / bp.precision_sum) / (n - 1)
    total = float(centred @ centred)
    mean, rss = bp.solve(centred)
    observed = _ratio(total, mean, rss, n)
    k = float(observed[0] / expected)
    p_value = None
    if permutations > 0:
        rng = np.random.default_rng(seed)
        above = 0
        for start in range(0, permutations, _PERMUTATION_CHUNK):
            count = min(_PERMUTATION_CHUNK, permutations - start)
            columns = np.stack([rng.permutation(centred) for _ in range(count)], axis=1)
            means, sums = bp.solve(columns)
            ratios = _ratio(total, means, sums, n)
            above += int(np.count_nonzero(ratios >= observed[0] * (1 - 1e-12)))
        p_value = (1 + above) / (1 + permutations)
    return SignalK(
        k=k,
        observed_ratio=float(observed[0]),
        expected_ratio=float(expected),
        p_value=p_value,
        permutations=permutations,
        seed=seed,
        measurement_error=tip_variance is not None,
    )


def _ratio(total: float, mean: np.ndarray, rss: np.ndarray, n: int) -> np.ndarray:
    # sum (y - a)^2 = sum y^2 - 2 a sum y + n a^2 = sum y^2 + n a^2 for centred y.
    return (total + n * mean**2) / rss
