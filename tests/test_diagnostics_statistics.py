"""Statistical properties on seeded simulations, with the tolerance of each
check stated beside it (in units of the simulation's own standard error
where that is the natural scale)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from curation.demo.phylogeny import random_tree, simulate_brownian
from curation.diagnostics import (
    blomberg_k,
    fit_brownian,
    fit_lambda,
    prepare_tree,
    trait_diagnostics,
)
from curation.diagnostics.dense import dense_covariance
from curation.diagnostics.fits import lambda_loglik
from curation.trees.arrays import parse_newick


def _tree(tips: int, seed: int):
    arrays = random_tree(tips, np.random.default_rng(seed))
    # simulate_brownian returns tips in arrays.tip_labels order; the
    # prepared tree keeps that order.
    return arrays, prepare_tree(arrays, arrays.tip_labels)


def test_k_averages_about_one_under_brownian_motion() -> None:
    # Blomberg, Garland and Ives (2003): K is scaled so that its
    # expectation under Brownian motion on the tree is about 1. 400 seeded
    # simulations on a 64-tip tree; K is skewed (sd about 0.9), so the mean
    # has a standard error near 0.045: tolerance 0.2 (over 4 SE).
    arrays, tree = _tree(64, 42)
    values = simulate_brownian(arrays, np.random.default_rng(1), columns=400)
    ks = np.array([blomberg_k(tree, values[:, j], permutations=0).k for j in range(400)])
    assert abs(ks.mean() - 1.0) < 0.2


def test_k_on_a_star_tree_is_exactly_one() -> None:
    # What "K on a star tree" means: on an ultrametric star tree of height
    # T, C = T I, so MSE0 / MSE = T for any data and its Brownian
    # expectation (tr C - n / 1'C^-1 1) / (n - 1) = (nT - T) / (n - 1) = T
    # too (the formula of Blomberg et al. 2003): K = 1 identically, and
    # every permutation gives the same K, so the permutation p-value is 1.
    #   +--A
    #   +--B     six tips of length 2 on the root
    #   ...
    #   +--F
    star = parse_newick("(A:2,B:2,C:2,D:2,E:2,F:2);")
    tree = prepare_tree(star, star.tip_labels)
    for seed in range(5):
        y = np.random.default_rng(seed).normal(size=6)
        result = blomberg_k(tree, y, permutations=50, seed=seed)
        assert abs(result.k - 1.0) < 1e-12
        assert result.p_value == 1.0


def test_k_is_near_zero_for_values_without_phylogenetic_structure() -> None:
    # "K about 0 on a star tree" in the sense that matters: values that
    # evolved on a star tree (independent normal values, no shared
    # history) analysed on a structured tree give K far below 1. For
    # white noise the ratio of expectations E[r'r] / E[r'C^-1 r] with
    # r = (I - 1 (1'C^-1 1)^-1 1'C^-1) y is tr(P'P) / tr(P'C^-1 P); divided
    # by K's Brownian expectation it is the K to expect. We check that the
    # mean K over 300 simulations is below 0.1 and within 30% of that
    # ratio-of-expectations approximation (a ratio's mean differs slightly
    # from the ratio of means).
    _, tree = _tree(64, 42)
    rng = np.random.default_rng(2)
    values = rng.normal(size=(64, 300))
    ks = np.array([blomberg_k(tree, values[:, j], permutations=0).k for j in range(300)])
    c = dense_covariance(tree)
    cinv = np.linalg.inv(c)
    ones = np.ones(64)
    p = np.eye(64) - np.outer(ones, ones @ cinv) / (ones @ cinv @ ones)
    expected_bm = (np.trace(c) - 64 / (ones @ cinv @ ones)) / 63
    approx = np.trace(p.T @ p) / np.trace(p.T @ cinv @ p) / expected_bm
    assert ks.mean() < 0.1
    assert abs(ks.mean() - approx) < 0.3 * approx


def test_k_permutation_test_detects_brownian_signal() -> None:
    # Under Brownian motion on a 200-tip tree the permutation test of
    # Blomberg et al. (2003) rejects "no signal"; for white noise the
    # p-value of a seeded run is not small.
    arrays, tree = _tree(200, 3)
    y = simulate_brownian(arrays, np.random.default_rng(4))
    assert blomberg_k(tree, y, permutations=200, seed=1).p_value < 0.05
    noise = np.random.default_rng(5).normal(size=200)
    assert blomberg_k(tree, noise, permutations=200, seed=1).p_value > 0.05


def test_lambda_recovers_simulated_values() -> None:
    # Pagel (1999) lambda by ML on a 400-tip tree, 30 simulations per
    # value. Lambda = 0 and 1 are recovered almost exactly (mean within
    # 0.05); at 0.5 the ML estimate scatters widely (sd about 0.19) and is
    # biased low on small trees (about -0.07 here; a known property of the
    # ML estimate, from memory), so the mean must be within 0.15, and the
    # likelihood-ratio 95% interval must cover 0.5 in at least 85% of runs
    # (its nominal coverage is 95%).
    arrays, tree = _tree(400, 7)
    rng = np.random.default_rng(8)
    for lam, tolerance in ((0.0, 0.05), (1.0, 0.05), (0.5, 0.15)):
        values = simulate_brownian(arrays, rng, lam=lam, columns=30)
        fits = [fit_lambda(tree, values[:, j]) for j in range(30)]
        estimates = np.array([f.lam for f in fits])
        assert abs(estimates.mean() - lam) < tolerance, lam
        if lam == 0.5:
            covered = [
                2 * (f.loglik - lambda_loglik(tree, values[:, j], lam)[0]) < 3.841
                for j, f in enumerate(fits)
            ]
            assert np.mean(covered) >= 0.85


def test_contrasts_recover_the_simulated_rate() -> None:
    # Felsenstein (1985): the mean square of the standardised contrasts
    # estimates the Brownian rate. 20 simulations at rate 2.5 on 500 tips:
    # each estimate has relative sd sqrt(2 / 499) = 6%, their mean 1.4%;
    # tolerance 5%.
    arrays, tree = _tree(500, 9)
    values = simulate_brownian(arrays, np.random.default_rng(10), rate=2.5, columns=20)
    rates = [fit_brownian(tree, values[:, j]).rate_reml for j in range(20)]
    assert abs(np.mean(rates) / 2.5 - 1.0) < 0.05


def test_measurement_error_variant_recovers_the_rate() -> None:
    # Brownian values observed with known noise (se = 0.5 on every tip;
    # terminal branches lengthened by up to half the height, so se^2 is
    # comparable to their variance): ignoring the noise inflates the rate;
    # the measurement-error variant (se^2 added to the terminal branch
    # variances) recovers it. 20 simulations, rate 1, 300 tips; the mean
    # of the variant's estimates has a standard error near 0.036 here, so
    # the tolerance is 0.15 (about 4 SE), and the naive rate must be
    # inflated by more than 50%.
    arrays = random_tree(300, np.random.default_rng(11), tip_noise=0.5)
    tree = prepare_tree(arrays, arrays.tip_labels)
    rng = np.random.default_rng(12)
    values = simulate_brownian(arrays, rng, rate=1.0, columns=20)
    se = np.full(300, 0.5)
    noisy = values + rng.normal(size=values.shape) * 0.5
    naive = [fit_brownian(tree, noisy[:, j]).rate_reml for j in range(20)]
    corrected = [fit_brownian(tree, noisy[:, j], se=se).rate_reml for j in range(20)]
    assert abs(np.mean(corrected) - 1.0) < 0.15
    assert np.mean(naive) > 1.5


def test_sentence_says_species_are_not_independent_under_signal() -> None:
    arrays, _ = _tree(150, 13)
    y = simulate_brownian(arrays, np.random.default_rng(14))
    result = trait_diagnostics(
        arrays, pd.Series(y, index=arrays.tip_labels), permutations=99, trait="wing length"
    )
    assert result.status == "ok"
    assert "not independent" in result.sentence
    assert result.sentence.startswith("wing length (150 species)")
    noise = np.random.default_rng(15).normal(size=150)
    calm = trait_diagnostics(arrays, pd.Series(noise, index=arrays.tip_labels), permutations=99)
    assert "defensible" in calm.sentence
