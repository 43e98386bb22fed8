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

from curation.demo.phylogeny import simulate_brownian
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
from curation.trees.arrays import TreeArrays, parse_newick, to_newick
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


# --- one pair of tips dominating the figures ---


def _near_zero_pair_data() -> tuple[str, pd.Series, list[str]]:
    """A pure-birth tree from DendroPy's simulator (Sukumaran and Holder
    2010; 148 tips, ultrametric), Brownian values plus a little measurement
    noise (2% of their spread) on every tip, and the first cherry's two
    terminal branches shrunk to 5e-6 of the height, its parent moved up so
    the tree stays ultrametric: the sister pair then differs by noise over a
    near-zero distance, as in a tree whose ultrametric repair left two tips
    0.0002 apart on a height of 40."""
    import random

    import dendropy

    simulated = dendropy.simulate.treesim.birth_death_tree(
        birth_rate=1.0, death_rate=0.0, max_time=5.0, rng=random.Random(1)
    )
    arrays = parse_newick(simulated.as_string(schema="newick", suppress_rooting=True).strip())
    rng = np.random.default_rng(1)
    y = simulate_brownian(arrays, rng)
    y = y + rng.normal(scale=0.02 * y.std(), size=len(y))
    parents, counts = np.unique(arrays.parent[arrays.tips], return_counts=True)
    cherry = int(parents[counts == 2][0])
    pair = np.flatnonzero(arrays.parent == cherry)
    lengths = arrays.edge_length.copy()
    short = 5e-6 * float(arrays.depths()[arrays.tips].max())
    lengths[cherry] += lengths[pair[0]] - short
    lengths[pair] = short
    tree = TreeArrays(parent=arrays.parent, edge_length=lengths, labels=list(arrays.labels))
    return (
        to_newick(tree),
        pd.Series(y, index=arrays.tip_labels),
        sorted(arrays.labels[k] for k in pair),
    )


def _dendropy_covariance(newick: str, labels: list[str]) -> np.ndarray:
    """C[i, j] = depth of the most recent common ancestor of tips i and j,
    from DendroPy's root distances and patristic distances:
    (d_i + d_j - patristic_ij) / 2."""
    import dendropy

    tree = dendropy.Tree.get(data=newick, schema="newick", preserve_underscores=True)
    pdm = tree.phylogenetic_distance_matrix()
    taxa = {t.label: t for t in tree.taxon_namespace}
    depth = {leaf.taxon.label: leaf.distance_from_root() for leaf in tree.leaf_node_iter()}
    out = np.empty((len(labels), len(labels)))
    for i, a in enumerate(labels):
        for j, b in enumerate(labels):
            path = 0.0 if a == b else pdm.patristic_distance(taxa[a], taxa[b])
            out[i, j] = (depth[a] + depth[b] - path) / 2
    return out


def _numpy_k(c: np.ndarray, y: np.ndarray) -> float:
    """Blomberg's K by its matrix formula (Blomberg, Garland and Ives 2003):
    (MSE0 / MSE) / ((tr C - n / 1'C^-1 1) / (n - 1))."""
    n = len(y)
    inverse = np.linalg.inv(c)
    ones = np.ones(n)
    a = float(ones @ inverse @ y) / float(ones @ inverse @ ones)
    r = y - a
    observed = float(r @ r) / float(r @ inverse @ r)
    expected = (np.trace(c) - n / float(ones @ inverse @ ones)) / (n - 1)
    return observed / expected


def test_a_near_zero_sister_pair_is_named_instead_of_advising_a_transformation(
    tmp_path: Path,
) -> None:
    from curation.store import create_store

    newick, values, pair = _near_zero_pair_data()
    # Through the command line, as a user reads it.
    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        tree_id = _stored_tree(opened, newick)
    csv = tmp_path / "species.csv"
    pd.DataFrame(
        {"tip_label": values.index, "trait": "wing", "kind": "continuous", "mean": values}
    ).to_csv(csv, index=False)
    done = subprocess.run(
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
    assert done.returncode == 0, done.stderr
    said = " ".join(done.stdout.split())
    assert f"the sister tips {pair[0]!r} and {pair[1]!r} dominate these figures" in said
    assert "near-zero terminal branches" in said
    assert "transform the branch lengths before" not in said
    assert "no reason to transform the branch lengths" in said
    # The figures behind the sentence.
    result = trait_diagnostics(parse_newick(newick), values, permutations=0, trait="wing")
    # The contrasts' branch-length check (Garland, Harvey and Ives 1992) is
    # significant only because of the one pair.
    assert result.adequacy is not None and result.adequacy.p_value < 0.05
    d = result.dominance
    assert d is not None and d.tips == pair and all(d.near_zero)
    # Outside references: the pair's contrast (x_a - x_b) / sqrt(v_a + v_b)
    # (Felsenstein 1985) over r'C^-1 r with C from DendroPy, and K of the
    # tree without either tip by the matrix formula.
    labels = sorted(values.index)
    c = _dendropy_covariance(newick, labels)
    y = values.reindex(labels).to_numpy()
    inverse = np.linalg.inv(c)
    ones = np.ones(len(y))
    r = y - float(ones @ inverse @ y) / float(ones @ inverse @ ones)
    a, b = (labels.index(t) for t in pair)
    terminal = c[a, a] - c[a, b]
    cherry = (y[a] - y[b]) ** 2 / (2 * terminal)
    assert d.share == pytest.approx(cherry / float(r @ inverse @ r), rel=1e-6)
    for tip, k in zip(d.left_out, d.k_without, strict=True):
        keep = [i for i, label in enumerate(labels) if label != tip]
        assert k == pytest.approx(_numpy_k(c[np.ix_(keep, keep)], y[keep]), rel=1e-6)
    assert min(d.k_without) > 3 * result.blomberg.k


def test_brownian_data_are_rarely_called_dominated() -> None:
    # Under Brownian motion the contrasts are independent with one variance
    # (Felsenstein 1985), so one carrying half their squares is rare, and
    # the test at 0.01 calls about 1% of traits dominated. 300 seeded
    # traits on a 60-tip tree and on a 6-tip tree (where one contrast of
    # five often carries half by chance); the binomial SE of a 1% rate over
    # 300 is 0.57%, so at most 3% (over 3 SE) may be called dominated.
    from curation.demo.phylogeny import random_tree
    from curation.diagnostics.contrasts import contrast_table
    from curation.diagnostics.influence import find_dominance
    from curation.diagnostics.likelihood import BrownianPass, edge_variances

    for tips in (60, 6):
        arrays = random_tree(tips, np.random.default_rng(tips))
        tree = prepare_tree(arrays, arrays.tip_labels)
        columns = simulate_brownian(arrays, np.random.default_rng(7), columns=300)
        bp = BrownianPass(tree, edge_variances(tree))
        called = sum(
            find_dominance(arrays, tree, columns[:, j], contrast_table(bp, columns[:, j]))
            is not None
            for j in range(300)
        )
        assert called <= 0.03 * 300, (tips, called)
