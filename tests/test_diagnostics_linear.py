"""The linear-time pass against the dense reference path and outside
libraries, to 1e-8 relative: the GLS mean against numpy.linalg.solve and
statsmodels' GLS, log-likelihoods against scipy.stats.multivariate_normal,
Pagel's lambda surface, Blomberg's K against its published matrix formula,
and the pruning against DendroPy's patristic distances."""

from __future__ import annotations

import math

import dendropy
import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import multivariate_normal

from curation.demo.phylogeny import random_tree
from curation.diagnostics import (
    BrownianPass,
    blomberg_k,
    edge_variances,
    fit_brownian,
    prepare_tree,
    standardised_contrasts,
)
from curation.diagnostics.dense import (
    dense_blomberg_k,
    dense_covariance,
    dense_gls_mean,
    dense_lambda_covariance,
    dense_loglik_ml,
    dense_loglik_reml,
)
from curation.diagnostics.fits import brownian_loglik, lambda_loglik
from curation.trees.arrays import parse_newick, to_newick

REL = 1e-8

# The named gallery of edge cases (each drawn beside its Newick text).
GALLERY = {
    # A ---1--- +
    # B ---2--- +   (two tips on the root)
    "two tips": "(A:1,B:2);",
    #  +--A   all four on the root, equal lengths
    #  +--B
    #  +--C
    #  +--D
    "star": "(A:1,B:1,C:1,D:1);",
    #        +--A
    #   +----+--B      a three-way polytomy beside a cherry
    #   |    +--C
    # --+
    #   |  +---D
    #   +--+
    #      +---E
    "polytomy": "((A:1,B:1,C:1):1,(D:0.5,E:0.5):1.5);",
    #   +(0)-+--A      the zero-length branch makes (A,B) part of the root's
    #   |    +--B      polytomy; E is shorter than D (not ultrametric)
    # --+--C
    #   +----+--D
    #        +-E
    "zero internal branch": "((A:1,B:1):0,C:1,(D:1,E:0.5):0.5);",
    #      +A (length 0)   A's value pins its parent's state
    #   +--+
    #   |  +---B
    # --+
    #   |  +--C
    #   +--+
    #      +--D
    "zero terminal branch": "((A:0,B:1):1,(C:1,D:1.5):1);",
    #   +--+----A      a node with one child (folded away) and a longer
    # --+             stem for B
    #   +--+--B
    #      +--C
    "single-child node": "((A:1):0.5,(B:1,C:2):1);",
}


def close(a: float, b: float, rel: float = REL) -> bool:
    return math.isclose(a, b, rel_tol=rel, abs_tol=rel * 1e-3)


def _prepared(newick: str):
    arrays = parse_newick(newick)
    return prepare_tree(arrays, sorted(arrays.tip_labels))


def _check_against_dense(tree, y: np.ndarray) -> None:
    n = len(y)
    c = dense_covariance(tree)
    bp = BrownianPass(tree, edge_variances(tree))
    mean, rss = bp.solve(y)
    reference_mean, precision = dense_gls_mean(c, y)  # numpy.linalg.solve
    assert close(mean[0], reference_mean)
    assert close(bp.precision_sum, precision)
    assert close(bp.log_det, np.linalg.slogdet(c)[1])
    assert close(bp.trace, float(np.trace(c)))
    r = y - reference_mean
    assert close(rss[0], float(r @ np.linalg.solve(c, r)))
    fit = fit_brownian(tree, y)
    if n >= 2:
        # statsmodels' GLS with the matrix as sigma: same estimate and the
        # same standard error (its scale is RSS / (n - 1), our REML rate).
        gls = sm.GLS(y, np.ones((n, 1)), sigma=c).fit()
        assert close(fit.mean, float(gls.params[0]))
        if n > 1:
            assert close(fit.mean_se, float(gls.bse[0]))
        # scipy.stats.multivariate_normal.logpdf at the ML estimates.
        assert close(fit.loglik_ml, dense_loglik_ml(fit.rate_ml * c, y, reference_mean))
        assert close(fit.loglik_reml, dense_loglik_reml(fit.rate_reml * c, y))


@pytest.mark.parametrize("name", sorted(GALLERY))
def test_gallery_against_dense(name: str) -> None:
    tree = _prepared(GALLERY[name])
    y = np.linspace(-1.3, 2.1, tree.tip_count) ** 2
    _check_against_dense(tree, y)


trees = st.builds(
    lambda seed, tips, collapse, noise: random_tree(
        tips, np.random.default_rng(seed), collapse=collapse, tip_noise=noise
    ),
    st.integers(0, 2**32 - 1),
    st.integers(3, 60),
    st.sampled_from([0.0, 0.3, 0.7]),
    st.sampled_from([0.0, 0.5]),
)


@settings(max_examples=40, deadline=None)
@given(arrays=trees, seed=st.integers(0, 2**32 - 1))
def test_random_trees_against_dense(arrays, seed: int) -> None:
    tree = prepare_tree(arrays, arrays.tip_labels)
    y = np.random.default_rng(seed).normal(size=tree.tip_count) * 3 + 10
    _check_against_dense(tree, y)


@settings(max_examples=30, deadline=None)
@given(arrays=trees, seed=st.integers(0, 2**32 - 1))
def test_lambda_surface_against_dense(arrays, seed: int) -> None:
    # Pagel (1999): C_lambda = lambda C off the diagonal, diagonal kept.
    tree = prepare_tree(arrays, arrays.tip_labels)
    n = tree.tip_count
    y = np.random.default_rng(seed).normal(size=n)
    c = dense_covariance(tree)
    for lam in (0.0, 0.1, 0.5, 0.9, 1.0):
        v = dense_lambda_covariance(c, lam)
        mean, _ = dense_gls_mean(v, y)
        r = y - mean
        rate = float(r @ np.linalg.solve(v, r)) / n
        expected = dense_loglik_ml(rate * v, y, mean)  # scipy multivariate_normal
        got, got_rate = lambda_loglik(tree, y, lam)
        assert close(got, expected), lam
        assert close(got_rate, rate), lam


@settings(max_examples=30, deadline=None)
@given(arrays=trees, seed=st.integers(0, 2**32 - 1))
def test_measurement_error_likelihood_against_dense(arrays, seed: int) -> None:
    # V = rate C_lambda + diag(se^2): the species' SEs on the diagonal.
    tree = prepare_tree(arrays, arrays.tip_labels)
    n = tree.tip_count
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    se = rng.uniform(0.0, 0.5, n)
    c = dense_covariance(tree)
    for lam, rate in ((1.0, 0.7), (0.4, 2.0)):
        v = rate * dense_lambda_covariance(c, lam) + np.diag(se**2)
        mean, _ = dense_gls_mean(v, y)
        ml, reml, _, got_mean = brownian_loglik(tree, y, se**2, lam, rate)
        assert close(got_mean, mean)
        assert close(ml, dense_loglik_ml(v, y, mean))
        assert close(reml, dense_loglik_reml(v, y))


@settings(max_examples=30, deadline=None)
@given(arrays=trees, seed=st.integers(0, 2**32 - 1))
def test_blomberg_k_against_formula(arrays, seed: int) -> None:
    # Blomberg, Garland and Ives (2003): the matrix formula in dense.py.
    tree = prepare_tree(arrays, arrays.tip_labels)
    y = np.random.default_rng(seed).normal(size=tree.tip_count) + 100.0
    result = blomberg_k(tree, y, permutations=0)
    assert close(result.k, dense_blomberg_k(dense_covariance(tree), y))


def test_blomberg_k_permutations_against_dense() -> None:
    # Each permuted column through the pass equals the dense formula on
    # the permuted values (same generator, same order).
    arrays = random_tree(40, np.random.default_rng(5), collapse=0.3)
    tree = prepare_tree(arrays, arrays.tip_labels)
    y = np.random.default_rng(6).normal(size=40)
    c = dense_covariance(tree)
    result = blomberg_k(tree, y, permutations=30, seed=11)
    rng = np.random.default_rng(11)
    centred = y - y.mean()
    ks = np.array([dense_blomberg_k(c, rng.permutation(centred)) for _ in range(30)])
    assert result.p_value == (1 + int((ks >= result.k * (1 - 1e-12)).sum())) / 31


def test_contrasts_add_up_to_the_quadratic_form() -> None:
    # Felsenstein (1985): the squared standardised contrasts sum to
    # r'C^-1 r; with polytomies resolved by zero-length branches (Pagel
    # 1992) there are n - 1 of them.
    for name, newick in GALLERY.items():
        tree = _prepared(newick)
        y = np.arange(tree.tip_count, dtype=float) ** 1.5
        bp = BrownianPass(tree, edge_variances(tree))
        contrast, sd, _ = standardised_contrasts(bp, y)
        _, rss = bp.solve(y)
        assert len(contrast) == tree.tip_count - 1, name
        assert close(float((contrast**2).sum()), float(rss[0])), name
        assert (sd > 0).all()


def test_cherry_contrast_by_hand() -> None:
    #   +--+--A (1)      Felsenstein (1985): contrast of A and B is
    #   |  +--B (3)      (yA - yB) / sqrt(1 + 3) = (2 - 6) / 2 = -2 (or +2);
    # --+                the node's value is (yA/1 + yB/3) / (1 + 1/3) = 3
    #   +-----C (2)      and its branch grows by 1*3/4 to 1.75; the root
    #                    contrast is (3 - 1) / sqrt(1.75 + 2).
    tree = _prepared("((A:1,B:3):1,C:2);")
    bp = BrownianPass(tree, edge_variances(tree))
    contrast, sd, _ = standardised_contrasts(bp, np.array([2.0, 6.0, 1.0]))
    got = sorted(zip(np.abs(contrast).round(12), sd.round(12), strict=True))
    expected = sorted([(2.0, 2.0), (round(2 / math.sqrt(3.75), 12), round(math.sqrt(3.75), 12))])
    assert got == expected


def test_pruning_keeps_patristic_distances_of_dendropy() -> None:
    # DendroPy (Sukumaran and Holder 2010) as the outside reference: the
    # distances between the kept tips on the original tree equal those of
    # the pruned, re-rooted tree (d_ij = C_ii + C_jj - 2 C_ij).
    arrays = random_tree(30, np.random.default_rng(9), collapse=0.3, tip_noise=0.4)
    keep = sorted(arrays.tip_labels)[::3]
    tree = prepare_tree(arrays, keep)
    c = dense_covariance(tree)
    ours = np.diag(c)[:, None] + np.diag(c)[None, :] - 2 * c
    reference = dendropy.Tree.get(
        data=to_newick(arrays), schema="newick", preserve_underscores=True
    )
    pdm = reference.phylogenetic_distance_matrix()
    taxa = {t.label: t for t in reference.taxon_namespace}
    for i, a in enumerate(keep):
        for j, b in enumerate(keep):
            if i < j:
                assert close(ours[i, j], pdm.patristic_distance(taxa[a], taxa[b]), 1e-9)
    # The new root is the most recent common ancestor: some pair of tips
    # meets there, so the smallest depth of a pairwise meeting point is 0.
    assert np.isclose((c - np.diag(np.diag(c))).min(), 0.0)


def test_scipy_logpdf_two_tips_by_hand() -> None:
    #  A --1-- +     C = diag(1, 2): independent normals, so the ML
    #  B --2-- +     log-likelihood is a sum of two univariate log-densities
    #                (scipy.stats.norm as the outside reference).
    from scipy.stats import norm

    tree = _prepared(GALLERY["two tips"])
    y = np.array([1.0, 4.0])
    fit = fit_brownian(tree, y)
    mean = (1.0 / 1 + 4.0 / 2) / (1 + 1 / 2)
    assert close(fit.mean, mean)
    rate = ((1 - mean) ** 2 / 1 + (4 - mean) ** 2 / 2) / 2
    expected = norm.logpdf(1.0, mean, math.sqrt(rate)) + norm.logpdf(4.0, mean, math.sqrt(2 * rate))
    assert close(fit.loglik_ml, float(expected))
    assert close(
        fit.loglik_ml,
        float(multivariate_normal.logpdf(y, [mean, mean], np.diag([rate, 2 * rate]))),
    )
