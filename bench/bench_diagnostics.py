"""Benchmark of the trait diagnostics: the linear path at 1,000, 10,000 and
50,000 tips beside the dense reference path at 500, 1,000 and 2,000 tips,
with the growth rate (log-log slope of time against tips) of each.

Workloads:
- "core" = GLS mean and SE, REML/ML rate and log-likelihoods, Pagel's
  lambda by ML (grid and refinement), Blomberg's K without permutations;
  the same quantities on both paths (the dense path evaluates lambda's
  likelihood on the same 11-point grid, by Cholesky of the n x n matrix).
- "full" = everything trait_diagnostics reports, with 1,000 permutations
  for K (target: under 60 s at 50,000 tips on 2 cores).
Peak memory is what tracemalloc sees (NumPy arrays; SuperLU's internal
work space is not counted). Trees are seeded random coalescent trees; a
caterpillar tree of 50,000 tips shows the linear path does not depend on
the tree's shape.

Run: python bench/run.py diagnostics
"""

from __future__ import annotations

import math
import statistics
import time
import tracemalloc
from collections.abc import Callable

import numpy as np
import pandas as pd
from scipy import linalg

from curation.demo.phylogeny import caterpillar_tree, random_tree, simulate_brownian
from curation.diagnostics import (
    blomberg_k,
    fit_brownian,
    fit_lambda,
    prepare_tree,
    trait_diagnostics,
)
from curation.diagnostics.dense import dense_covariance, dense_lambda_covariance

LINEAR_SIZES = [1_000, 10_000, 50_000]
DENSE_SIZES = [500, 1_000, 2_000]


def _measure(work: Callable[[], object], repeats: int) -> tuple[float, float]:
    """Median seconds over ``repeats`` and peak MB of one traced run."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    tracemalloc.start()
    work()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return statistics.median(times), peak / 1e6


def _linear_core(tree, y) -> None:
    fit_brownian(tree, y)
    fit_lambda(tree, y)
    blomberg_k(tree, y, permutations=0)


def _dense_core(c: np.ndarray, y: np.ndarray) -> None:
    n = len(y)
    ones = np.ones(n)

    def profile(v: np.ndarray) -> tuple[float, float, float, np.ndarray, float]:
        factor = linalg.cho_factor(v)
        vinv_1 = linalg.cho_solve(factor, ones)
        precision = float(ones @ vinv_1)
        mean = float(vinv_1 @ y) / precision
        r = y - mean
        rss = float(r @ linalg.cho_solve(factor, r))
        log_det = 2.0 * float(np.log(np.diag(factor[0])).sum())
        return mean, precision, rss, r, log_det

    _, precision, rss, r, _ = profile(c)
    # K by its matrix formula (Blomberg, Garland and Ives 2003).
    _ = (float(r @ r) / rss) / ((np.trace(c) - n / precision) / (n - 1))
    for lam in np.linspace(0, 1, 11):
        _, _, rss_l, _, log_det_l = profile(dense_lambda_covariance(c, float(lam)))
        _ = -0.5 * (n * math.log(2 * math.pi * rss_l / n) + log_det_l + n)


def _slope(sizes: list[int], seconds: list[float]) -> float:
    return float(np.polyfit(np.log(sizes), np.log(seconds), 1)[0])


def run() -> list[dict]:
    rows: list[dict] = []
    rng = np.random.default_rng(2026)
    core_times = []
    for n in LINEAR_SIZES:
        arrays = random_tree(n, rng)
        y = simulate_brownian(arrays, rng, lam=0.7)
        tree = prepare_tree(arrays, arrays.tip_labels)
        seconds, peak = _measure(
            lambda tree=tree, y=y: _linear_core(tree, y), 3 if n < 50_000 else 1
        )
        core_times.append(seconds)
        rows.append(_row(f"linear core, {n} tips", seconds, "s", ""))
        rows.append(_row(f"linear core peak memory, {n} tips", peak, "MB", ""))
        values = pd.Series(y, index=arrays.tip_labels)
        seconds, peak = _measure(
            lambda arrays=arrays, values=values: trait_diagnostics(
                arrays, values, permutations=1000
            ),
            1,
        )
        target = "< 60 s" if n == 50_000 else ""
        rows.append(_row(f"linear full + 1000 perms, {n} tips", seconds, "s", target))
        rows.append(_row(f"linear full peak memory, {n} tips", peak, "MB", ""))
    rows.append(
        _row("linear core growth (log-log slope)", _slope(LINEAR_SIZES, core_times), "", "~1")
    )
    arrays = caterpillar_tree(50_000)
    y = simulate_brownian(arrays, rng)
    tree = prepare_tree(arrays, arrays.tip_labels)
    seconds, _ = _measure(lambda: _linear_core(tree, y), 1)
    rows.append(_row("linear core, 50000-tip caterpillar", seconds, "s", "like random"))
    dense_times = []
    for n in DENSE_SIZES:
        arrays = random_tree(n, rng)
        y = simulate_brownian(arrays, rng, lam=0.7)
        tree = prepare_tree(arrays, arrays.tip_labels)
        c = dense_covariance(tree)
        seconds, peak = _measure(lambda c=c, y=y: _dense_core(c, y), 3)
        linear_seconds, _ = _measure(lambda tree=tree, y=y: _linear_core(tree, y), 3)
        dense_times.append(seconds)
        rows.append(_row(f"dense core, {n} tips", seconds, "s", ""))
        rows.append(_row(f"dense core peak memory, {n} tips", peak, "MB", ""))
        rows.append(_row(f"dense / linear time, {n} tips", seconds / linear_seconds, "x", ""))
    rows.append(
        _row("dense core growth (log-log slope)", _slope(DENSE_SIZES, dense_times), "", "~3")
    )
    return rows


def _row(measure: str, value: float, unit: str, target: str) -> dict:
    return {
        "benchmark": "diagnostics",
        "measure": measure,
        "value": float(value),
        "unit": unit,
        "target": target,
    }


if __name__ == "__main__":
    for row in run():
        print(f"{row['measure']:44} {row['value']:12.3f} {row['unit']:4} {row['target']}")
