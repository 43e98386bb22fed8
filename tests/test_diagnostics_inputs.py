"""Awkward input to the diagnostics (two tips, zero-length branches, a
constant trait, missing values, bad values) and the store and command-line
paths: clear messages or documented handling, never a crash or a silent
NaN."""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from curation.diagnostics import (
    TraitDiagnostics,
    diagnose_traits,
    diagnostics_frame,
    prepare_tree,
    trait_diagnostics,
)
from curation.diagnostics.dense import dense_covariance, dense_gls_mean
from curation.errors import InputError, NotFoundError
from curation.store import Store
from curation.store.ledger import record_event
from curation.store.models import TreeSet
from curation.trees.arrays import parse_newick
from curation.trees.stored import add_tree

#        +--A
#   +----+--B
#   |    +--C       a polytomy, a cherry and a long tip
# --+  +---D
#   +--+
#   |  +---E
#   +------F
SIX = "((A:1,B:1,C:1):1,(D:0.5,E:0.5):1.5,F:2);"


def _numbers(model: TraitDiagnostics) -> list[float]:
    """Every float held by the result (nested models included)."""
    found: list[float] = []

    def walk(value: object) -> None:
        if isinstance(value, float):
            found.append(value)
        elif isinstance(value, dict):
            for v in value.values():
                walk(v)
        elif isinstance(value, list):
            for v in value:
                walk(v)

    walk(model.model_dump())
    return found


def _no_nan(model: TraitDiagnostics) -> None:
    assert all(math.isfinite(x) for x in _numbers(model)), model


def test_two_tips_give_mean_and_rate_only() -> None:
    #  A --1-- +
    #  B --3-- +
    arrays = parse_newick("(A:1,B:3);")
    result = trait_diagnostics(arrays, pd.Series({"A": 1.0, "B": 5.0}))
    assert result.status == "too_few_tips"
    # GLS mean by hand: (1/1 + 5/3) / (1 + 1/3) = 2; rate = one contrast
    # squared: (1 - 5)^2 / (1 + 3) = 4 (Felsenstein 1985).
    assert math.isclose(result.phylogenetic_mean, 2.0)
    assert math.isclose(result.rate_reml, 4.0)
    assert result.pagel_lambda is None and result.blomberg is None
    assert "too few" in result.sentence
    _no_nan(result)


def test_one_value_is_an_input_error() -> None:
    arrays = parse_newick(SIX)
    with pytest.raises(InputError, match="at least two"):
        trait_diagnostics(arrays, pd.Series({"A": 1.0, "B": np.nan}))


def test_constant_trait_is_documented_not_nan() -> None:
    arrays = parse_newick(SIX)
    result = trait_diagnostics(arrays, pd.Series(3.5, index=list("ABCDEF")))
    assert result.status == "constant"
    assert result.phylogenetic_mean == 3.5 and result.phylogenetic_se == 0.0
    assert result.rate_reml is None and result.blomberg is None
    assert "same" in result.sentence
    _no_nan(result)


def test_missing_values_are_pruned_and_said() -> None:
    arrays = parse_newick(SIX)
    values = pd.Series({"A": 1.0, "B": np.nan, "C": 2.0, "D": 4.0, "E": 3.0, "F": 7.0})
    result = trait_diagnostics(arrays, values, permutations=20)
    assert result.tips_pruned == 1 and result.pruned == ["B"]
    assert any("pruned" in note for note in result.notes)
    # Same as the tree written without B (and the result is finite).
    smaller = parse_newick("((A:1,C:1):1,(D:0.5,E:0.5):1.5,F:2);")
    direct = trait_diagnostics(smaller, values.dropna(), permutations=20)
    assert math.isclose(result.phylogenetic_mean, direct.phylogenetic_mean, rel_tol=1e-12)
    assert math.isclose(result.loglik_ml, direct.loglik_ml, rel_tol=1e-12)
    _no_nan(result)


def test_pruning_reroots_at_the_common_ancestor() -> None:
    #   +--+--A        keeping A and B only: the stem of 2 above their
    #   |  +--B        parent is dropped, so C = diag(1, 1)
    # --+
    #   +-----C
    arrays = parse_newick("((A:1,B:1):2,C:3);")
    tree = prepare_tree(arrays, ["A", "B"])
    assert np.allclose(dense_covariance(tree), np.eye(2))


def test_zero_length_terminal_branch_is_exact() -> None:
    #      +A (0)      one tip on a zero-length branch: C stays invertible,
    #   +--+           so the result must match numpy.linalg.solve with C
    #   |  +---B
    # --+
    #   +--C
    arrays = parse_newick("((A:0,B:1):1,C:2);")
    y = np.array([1.0, 3.0, 2.0])
    result = trait_diagnostics(arrays, pd.Series(y, index=["A", "B", "C"]), permutations=10)
    tree = prepare_tree(arrays, ["A", "B", "C"])
    mean, _ = dense_gls_mean(dense_covariance(tree), y)
    assert math.isclose(result.phylogenetic_mean, mean, rel_tol=1e-10)
    _no_nan(result)


def test_identical_tips_are_a_clear_error() -> None:
    #      +A (0)      A and B both on zero-length branches from one node:
    #   +--+           their rows of C are equal, C is singular
    #   |  +B (0)
    # --+
    #   +--C
    #   +--D
    arrays = parse_newick("((A:0,B:0):1,C:1,D:1.5);")
    values = pd.Series({"A": 1.0, "B": 2.0, "C": 0.5, "D": 1.5})
    with pytest.raises(InputError) as caught:
        trait_diagnostics(arrays, values)
    text = caught.value.describe()
    assert "'A'" in text and "'B'" in text and "singular" in text
    assert "se" in (caught.value.hint or "")
    # Standard errors do not rescue it: the plain diagnostics (always
    # computed) need C itself to be invertible.
    se = pd.Series(0.2, index=values.index)
    with pytest.raises(InputError):
        trait_diagnostics(arrays, values, se=se)


def test_zero_length_internal_branches_make_polytomies() -> None:
    # "(A,B):0" inside the root equals the root's own four-way polytomy.
    a = parse_newick("((A:1,B:1):0,C:1,D:2);")
    b = parse_newick("(A:1,B:1,C:1,D:2);")
    values = pd.Series({"A": 1.0, "B": 2.0, "C": 0.0, "D": 4.0})
    ra = trait_diagnostics(a, values, permutations=10)
    rb = trait_diagnostics(b, values, permutations=10)
    assert math.isclose(ra.loglik_ml, rb.loglik_ml, rel_tol=1e-12)
    assert math.isclose(ra.blomberg.k, rb.blomberg.k, rel_tol=1e-12)


def test_bad_values_report_every_problem() -> None:
    arrays = parse_newick(SIX)
    values = pd.Series(["1.0", "heavy", "inf", "2", "3", "4"], index=list("ABCDEF"))
    with pytest.raises(InputError) as caught:
        trait_diagnostics(arrays, values)
    messages = " ".join(p.message for p in caught.value.problems)
    assert "'heavy'" in messages and "infinite" in messages


def test_missing_branch_lengths_are_an_input_error() -> None:
    arrays = parse_newick("((A,B):1,C:1);")
    with pytest.raises(InputError, match="no length"):
        trait_diagnostics(arrays, pd.Series({"A": 1.0, "B": 2.0, "C": 3.0}))


def test_negative_se_is_an_input_error() -> None:
    arrays = parse_newick(SIX)
    values = pd.Series(np.arange(6.0), index=list("ABCDEF"))
    with pytest.raises(InputError, match="negative"):
        trait_diagnostics(arrays, values, se=pd.Series(-1.0, index=values.index))


def test_labels_off_the_tree_are_noted() -> None:
    arrays = parse_newick(SIX)
    values = pd.Series(np.arange(7.0), index=[*"ABCDEF", "Zed"])
    result = trait_diagnostics(arrays, values, permutations=10)
    assert any("'Zed'" in note for note in result.notes)


def test_same_seed_same_p_value() -> None:
    arrays = parse_newick(SIX)
    values = pd.Series([1.0, 1.2, 0.9, 3.0, 3.3, 6.0], index=list("ABCDEF"))
    one = trait_diagnostics(arrays, values, permutations=200, seed=4)
    two = trait_diagnostics(arrays, values, permutations=200, seed=4)
    assert one.blomberg.p_value == two.blomberg.p_value


def _stored_tree(store: Store, newick: str) -> int:
    with store.transaction() as session:
        event = record_event(session, "import-trees", summary="a tree for the diagnostics")
        tree_set = TreeSet(name="diagnostics test", event_id=event.id)
        session.add(tree_set)
        session.flush()
        tree = add_tree(session, tree_set, parse_newick(newick), index_in_file=0, newick=newick)
        return tree.id


def _species_frame() -> pd.DataFrame:
    rng = np.random.default_rng(0)
    rows = []
    for label in "ABCDEF":
        rows.append(
            {
                "tip_label": label,
                "trait": "mass",
                "kind": "continuous",
                "mean": float(rng.normal(10, 2)),
                "se": 0.3,
            }
        )
        rows.append(
            {"tip_label": label, "trait": "colour", "kind": "discrete", "mean": None, "se": None}
        )
        rows.append(
            {
                "tip_label": label,
                "trait": "wing",
                "kind": "continuous",
                "mean": None if label == "F" else float(rng.normal(5, 1)),
                "se": None,
            }
        )
    return pd.DataFrame(rows)


def test_diagnose_traits_on_a_stored_tree(store: Store) -> None:
    tree_id = _stored_tree(store, SIX)
    results = diagnose_traits(store, tree_id, _species_frame(), permutations=50)
    assert [r.trait for r in results] == ["mass", "wing"]  # the discrete trait is left out
    mass, wing = results
    assert mass.with_error is not None and mass.with_error.brownian.measurement_error
    assert wing.with_error is None and wing.tips_pruned == 1
    frame = diagnostics_frame(results)
    assert list(frame["trait"]) == ["mass", "wing"]
    for result in results:
        _no_nan(result)


def test_diagnose_traits_unknown_tree(store: Store) -> None:
    with pytest.raises(NotFoundError):
        diagnose_traits(store, 999, _species_frame())


def test_diagnose_traits_needs_the_columns(store: Store) -> None:
    tree_id = _stored_tree(store, SIX)
    with pytest.raises(InputError, match="tip_label"):
        diagnose_traits(store, tree_id, pd.DataFrame({"trait": ["x"], "mean": [1.0]}))


def test_command_prints_table_and_sentences(tmp_path: Path) -> None:
    from curation.store import create_store

    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        tree_id = _stored_tree(opened, SIX)
    csv = tmp_path / "species.csv"
    _species_frame().to_csv(csv, index=False)
    result = subprocess.run(
        [
            sys.executable,
            "-m",
            "curation",
            "diagnose-traits",
            "--tree",
            str(tree_id),
            "--values",
            str(csv),
            "--permutations",
            "99",
            "--store",
            str(path),
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert result.returncode == 0, result.stderr
    assert "Trait diagnostics" in result.stdout
    assert "mass (6 species)" in result.stdout and "wing (5 species)" in result.stdout
    missing = subprocess.run(
        [
            sys.executable,
            "-m",
            "curation",
            "diagnose-traits",
            "--tree",
            str(tree_id),
            "--values",
            str(tmp_path / "none.csv"),
            "--store",
            str(path),
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert missing.returncode == 2 and "Traceback" not in missing.stderr + missing.stdout
