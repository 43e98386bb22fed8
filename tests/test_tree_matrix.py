"""The phylogenetic variance-covariance matrix: against DendroPy's distances,
a slow reference, NumPy's linear algebra, and its memory guard."""

from __future__ import annotations

import numpy as np
import pytest
from tree_gallery import (
    GALLERY,
    dendropy_distances,
    dendropy_root_distances,
    random_newick,
    read_dendropy,
    ref_covariance,
)

from curation.errors import InputError
from curation.trees.arrays import parse_newick
from curation.trees.checks import check_tree
from curation.trees.matrix import check_covariance, covariance_matrix, covariance_report

WITH_LENGTHS = sorted(name for name in GALLERY if name != "no lengths")


@pytest.mark.parametrize("name", WITH_LENGTHS)
def test_matrix_matches_slow_reference(name: str) -> None:
    tree = parse_newick(GALLERY[name])
    labels, matrix = covariance_matrix(tree)
    assert labels == [tree.labels[t] for t in tree.tips]
    assert np.allclose(matrix, ref_covariance(tree), rtol=0, atol=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_entries_are_shared_path_lengths_from_dendropy_distances(seed: int) -> None:
    text = random_newick(30, seed, ultrametric=seed % 2 == 0)
    labels, matrix = covariance_matrix(parse_newick(text))
    dendro = read_dendropy(text)
    root = dendropy_root_distances(dendro)
    pairs = dendropy_distances(dendro)
    # Shared path of i and j = (d(root,i) + d(root,j) - d(i,j)) / 2, with the
    # distances from DendroPy's PhylogeneticDistanceMatrix.
    for i, a in enumerate(labels):
        assert matrix[i, i] == pytest.approx(root[a], abs=1e-12)
        for j in range(i + 1, len(labels)):
            b = labels[j]
            expected = (root[a] + root[b] - pairs[frozenset((a, b))]) / 2
            assert matrix[i, j] == pytest.approx(expected, abs=1e-9)
            assert matrix[j, i] == matrix[i, j]


def test_tip_to_tip_distances_agree_with_dendropy() -> None:
    text = random_newick(25, 11, ultrametric=False)
    labels, matrix = covariance_matrix(parse_newick(text))
    pairs = dendropy_distances(read_dendropy(text))
    for i, a in enumerate(labels):
        for j in range(i + 1, len(labels)):
            ours = matrix[i, i] + matrix[j, j] - 2 * matrix[i, j]
            assert ours == pytest.approx(pairs[frozenset((a, labels[j]))], abs=1e-9)


def test_memory_guard_states_bytes_and_refuses() -> None:
    tree = parse_newick(random_newick(100, 1))
    # 100 x 100 float64 = 80,000 bytes (8 bytes per IEEE 754 double).
    with pytest.raises(InputError, match="needs 80,000 bytes") as info:
        covariance_matrix(tree, memory_limit_bytes=79_999)
    assert "--memory-limit" in str(info.value)
    labels, matrix = covariance_matrix(tree, memory_limit_bytes=80_000)
    assert matrix.shape == (100, 100) and len(labels) == 100
    # The checks hold four such matrices at once.
    with pytest.raises(InputError, match="needs 320,000 bytes"):
        covariance_report(tree, memory_limit_bytes=80_000)


def test_positive_definite_tree_against_numpy() -> None:
    tree = parse_newick(random_newick(40, 5))
    report = covariance_report(tree)
    _, matrix = covariance_matrix(tree)
    values = np.linalg.eigvalsh(matrix)  # NumPy as the outside reference
    assert report["positive_definite"]
    assert report["smallest_eigenvalue"] == pytest.approx(values[0])
    assert report["condition_number"] == pytest.approx(np.linalg.cond(matrix), rel=1e-6)
    assert report["singular_tips"] == []


def test_zero_length_sisters_make_it_singular() -> None:
    # ((A:0,B:0):2,(C:1,D:1):1): A and B have identical rows.
    tree = parse_newick(GALLERY["zero tips"])
    report = covariance_report(tree)
    assert not report["positive_definite"]
    assert report["singular_tips"] == ["A", "B"]
    # NumPy agrees: the matrix has rank 3 of 4.
    assert np.linalg.matrix_rank(covariance_matrix(tree)[1]) == 3
    codes = [f.code for f in check_covariance(tree)]
    assert codes == ["tree.covariance_matrix", "tree.covariance_not_positive_definite"]


def test_tip_at_the_root_makes_it_singular() -> None:
    # (A:0,(B:1,C:1):1): A's row is all zeros.
    report = covariance_report(parse_newick("(A:0,(B:1,C:1):1);"))
    assert report["singular_tips"] == ["A"]
    assert report["condition_number"] == float("inf")


def test_check_tree_runs_matrix_only_on_request() -> None:
    tree = parse_newick(GALLERY["balanced ultrametric"])
    assert not [f for f in check_tree(tree) if "covariance" in f.code]
    found = [f for f in check_tree(tree, matrix=True) if "covariance" in f.code]
    assert [f.code for f in found] == ["tree.covariance_matrix"]
    # ((A,B),C) with lengths 1,1,1,2: C = [[2,1,0],[1,2,0],[0,0,2]], whose
    # eigenvalues are 1, 2 and 3 (worked by hand).
    assert found[0].details["smallest_eigenvalue"] == pytest.approx(1.0)
    assert found[0].details["condition_number"] == pytest.approx(3.0)


def test_missing_lengths_are_refused() -> None:
    with pytest.raises(InputError, match="no length"):
        covariance_matrix(parse_newick(GALLERY["no lengths"]))
