"""Repairs: the pure edits keep what they promise (checked with DendroPy and
NumPy), every written tree reads back in DendroPy, and stored repairs make
a derived set with one ledger event, leaving the original untouched."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select
from tree_gallery import (
    GALLERY,
    dendropy_distances,
    dendropy_root_distances,
    random_newick,
    read_dendropy,
    ref_depths,
)

from curation.errors import ConflictError, InputError, NotFoundError
from curation.store import Store, create_store
from curation.store.models import LedgerEvent, Tree, TreeSet
from curation.trees.arrays import TreeArrays, parse_newick, to_newick
from curation.trees.checks import check_tree, measure_ultrametricity
from curation.trees.edits import (
    children_sorted,
    made_ultrametric,
    polytomies_resolved,
    pruned,
    short_branches_collapsed,
    zero_tips_lengthened,
)
from curation.trees.repairs import (
    collapse_short_branches,
    lengthen_zero_tips,
    make_ultrametric,
    prune_trees,
    resolve_polytomies,
    sort_children,
)
from curation.trees.stored import add_tree, load_tree_set
from tests.test_cli import run_cli


def reads_back_the_same(tree: TreeArrays, expected: dict[frozenset[str], float]) -> None:
    """The tree as we write it, read by DendroPy (underscores kept), has the
    expected tips and patristic distances."""
    dendro = read_dendropy(to_newick(tree))
    assert sorted(t.label for t in dendro.taxon_namespace) == sorted(tree.tip_labels)
    got = dendropy_distances(dendro)
    assert got.keys() == expected.keys()
    for pair, value in expected.items():
        assert got[pair] == pytest.approx(value, abs=1e-9), pair


def codes(tree: TreeArrays) -> list[str]:
    return [f.code for f in check_tree(tree)]


# --- pruning ---


@settings(max_examples=40, deadline=None)
@given(
    tips=st.integers(min_value=2, max_value=40),
    seed=st.integers(min_value=0, max_value=10_000),
    keep_fraction=st.floats(min_value=0.05, max_value=1.0),
    polytomies=st.booleans(),
)
def test_pruning_keeps_every_distance_between_kept_tips(
    tips: int, seed: int, keep_fraction: float, polytomies: bool
) -> None:
    text = random_newick(tips, seed, ultrametric=seed % 2 == 0, polytomy_chance=0.3 * polytomies)
    tree = parse_newick(text)
    rng = np.random.default_rng(seed)
    count = max(1, round(keep_fraction * tips))
    keep = set(rng.choice(tree.tip_labels, size=count, replace=False).tolist())
    result = pruned(tree, keep)
    assert sorted(result.tip_labels) == sorted(keep)
    assert "tree.single_child_node" not in codes(result)
    # DendroPy's distances on the original tree are the outside judge.
    original = dendropy_distances(read_dendropy(text))
    expected = {pair: d for pair, d in original.items() if pair <= keep}
    if len(keep) > 1:
        reads_back_the_same(result, expected)


def test_prune_examples() -> None:
    # ((C,(B,A)x)y,(E,D),F): keeping A, B and E suppresses y and (E,D).
    tree = parse_newick("((C:1,(B:1,A:1)x:1)y:1,(E:1,D:0):2,F:3);")
    assert to_newick(pruned(tree, ["A", "B", "E"])) == "((B:1.0,A:1.0)x:2.0,E:3.0);"
    # The root moves down to the common ancestor of the kept tips.
    assert to_newick(pruned(tree, ["A", "C"])) == "(C:1.0,A:2.0)y;"
    assert to_newick(pruned(tree, ["F"])) == "F;"
    with pytest.raises(InputError) as info:
        pruned(tree, ["A", "Zed", "Yak"])
    assert [p.value for p in info.value.problems] == ["Yak", "Zed"]


# --- polytomies ---


@pytest.mark.parametrize("seed", [None, 0, 1])
def test_resolving_leaves_a_binary_tree_with_the_same_distances(seed: int | None) -> None:
    text = random_newick(30, 3, polytomy_chance=0.5)
    tree = parse_newick(text)
    assert "tree.polytomy" in codes(tree) or tree.child_count[0] > 2
    result = polytomies_resolved(tree, seed=seed)
    assert result.child_count.max() == 2
    reads_back_the_same(result, dendropy_distances(read_dendropy(text)))


def test_resolving_with_a_minimum_branch_keeps_depths() -> None:
    # (A:1,B:1,C:1,D:1) resolved with 0.1 branches: tips stay at depth 1.
    tree = parse_newick(GALLERY["star"])
    for seed in (None, 4):
        result = polytomies_resolved(tree, branch_length=0.1, seed=seed)
        assert result.child_count.max() == 2
        internal = ~result.is_tip
        internal[0] = False
        assert np.all(result.edge_length[internal] == 0.1)
        assert np.allclose(result.depths()[result.tips], 1.0)
        assert codes(result) == []


def test_random_resolution_is_reproducible_and_seed_dependent() -> None:
    tree = parse_newick("(" + ",".join(f"T{k}:1" for k in range(12)) + ");")
    a = to_newick(polytomies_resolved(tree, seed=1))
    assert a == to_newick(polytomies_resolved(tree, seed=1))
    assert len({to_newick(polytomies_resolved(tree, seed=s)) for s in range(6)}) > 1
    assert to_newick(polytomies_resolved(tree)) == to_newick(polytomies_resolved(tree))
    with pytest.raises(InputError, match="--branch-length"):
        polytomies_resolved(tree, branch_length=-1)


# --- collapsing, ultrametric, zero tips, ordering ---


def test_collapsing_short_branches_keeps_root_to_tip_distances() -> None:
    text = "(((A:1,B:1):0.001,C:1.001):2,(D:2,E:2):1.001);"
    tree = parse_newick(text)
    result = short_branches_collapsed(tree, 0.01)
    assert to_newick(result) == "((A:1.001,B:1.001,C:1.001):2.0,(D:2.0,E:2.0):1.001);"
    # Root-to-tip distances (not tip-to-tip ones) are kept, per DendroPy.
    before = dendropy_root_distances(read_dendropy(text))
    after = dendropy_root_distances(read_dendropy(to_newick(result)))
    assert after == pytest.approx(before)
    assert short_branches_collapsed(tree, 0.0).node_count == tree.node_count


def test_extend_makes_a_rounded_tree_ultrametric_per_dendropy() -> None:
    text = random_newick(60, 2, decimals=2)
    tree = parse_newick(text)
    assert measure_ultrametricity(tree)["verdict"] == "rounding-level"
    result = made_ultrametric(tree)
    # DendroPy's node ages, at a precision far below the rounding.
    read_dendropy(to_newick(result)).calc_node_ages(ultrametricity_precision=1e-9)
    changed = 1 + np.flatnonzero(result.edge_length[1:] != tree.edge_length[1:])
    assert set(changed) <= set(tree.tips)  # only terminal branches move


def test_least_squares_matches_numpy_lstsq_and_beats_extend() -> None:
    tree = parse_newick(random_newick(25, 9, decimals=2))
    fitted = made_ultrametric(tree, method="least_squares")
    read_dendropy(to_newick(fitted)).calc_node_ages(ultrametricity_precision=1e-9)
    # The same least-squares problem, solved densely by NumPy: unknown ages
    # of internal nodes, one equation age(parent) - age(child) = length per branch.
    internal = np.flatnonzero(~tree.is_tip)
    column = {int(node): k for k, node in enumerate(internal)}
    design = np.zeros((tree.node_count - 1, len(internal)))
    for node in range(1, tree.node_count):
        design[node - 1, column[int(tree.parent[node])]] = 1.0
        if int(node) in column:
            design[node - 1, column[node]] = -1.0
    ages, *_ = np.linalg.lstsq(design, tree.edge_length[1:], rcond=None)
    assert fitted.depths()[tree.tips].max() == pytest.approx(ages[0], abs=1e-9)
    extended = made_ultrametric(tree, method="extend")

    def change(other: TreeArrays) -> float:
        return float(np.sum((other.edge_length[1:] - tree.edge_length[1:]) ** 2))

    assert change(fitted) <= change(extended) + 1e-12


def test_substantive_deviation_is_refused_unless_forced() -> None:
    tree = parse_newick(GALLERY["fossil tip"])
    with pytest.raises(ConflictError, match="substantively") as info:
        made_ultrametric(tree)
    assert "--force" in str(info.value)
    forced = made_ultrametric(tree, force=True)
    assert measure_ultrametricity(forced)["spread"] == pytest.approx(0, abs=1e-12)


def test_zero_tips_lengthened() -> None:
    text = GALLERY["zero tips"]  # ((A:0,B:0):2,(C:1,D:1):1): every tip at 2
    tree = parse_newick(text)
    kept = zero_tips_lengthened(tree, 0.01)
    assert "tree.zero_length_terminal" not in codes(kept)
    assert sorted(kept.edge_length[kept.tips].tolist()) == [0.01, 0.01, 1.0, 1.0]
    # The parent of A and B moved 0.01 towards the root: every root-to-tip
    # distance is as DendroPy measures it on the original.
    after = dendropy_root_distances(read_dendropy(to_newick(kept)))
    assert after == pytest.approx(dendropy_root_distances(read_dendropy(text)), abs=1e-12)
    alone = zero_tips_lengthened(tree, 0.01, keep_depths=False)
    assert dendropy_root_distances(read_dendropy(to_newick(alone)))["A"] == pytest.approx(2.01)
    # Without a length: a thousandth of the height (2).
    default = zero_tips_lengthened(tree)
    assert sorted(default.edge_length[default.tips].tolist())[:2] == [0.002, 0.002]
    with pytest.raises(InputError, match="--length"):
        zero_tips_lengthened(tree, 0)
    # 1e-6 is itself near zero on a tree of height 2 (below 2e-5).
    with pytest.raises(InputError, match="itself near zero"):
        zero_tips_lengthened(tree, 1e-6)
    assert to_newick(zero_tips_lengthened(tree, 1e-6, near_zero=0.0)).count("1e-06") == 2
    with pytest.raises(InputError, match="--near-zero"):
        zero_tips_lengthened(tree, 0.01, near_zero=1.5)


def test_near_zero_tips_are_lengthened_by_the_checks_rule() -> None:
    # 0.0002 on a tree of height 40 is below 1e-5 of the height: near zero.
    text = "((A:0.0002,B:0.0002):39.9998,(C:20,D:20):20);"
    tree = parse_newick(text)
    assert codes(tree).count("tree.zero_length_terminal") == 2
    result = zero_tips_lengthened(tree, 0.5)
    assert codes(result) == []
    assert dendropy_root_distances(read_dendropy(to_newick(result))) == pytest.approx(
        dendropy_root_distances(read_dendropy(text)), abs=1e-9
    )
    # With a smaller share they are not near zero, and nothing changes.
    assert zero_tips_lengthened(tree, 0.5, near_zero=1e-6) is tree


def test_a_tip_whose_parent_cannot_give_the_length_is_lengthened_alone() -> None:
    # The parent of A and B sits 0.001 below its own parent: it cannot move
    # 0.002 up, so A and B end 0.002 further from the root; C's parent is
    # the root, which cannot move either.
    text = "((((A:0,B:0):0.001,E:0.001):1.999,D:2):1,C:0);"
    tree = parse_newick(text)
    result = zero_tips_lengthened(tree)  # 0.001 of the height 3: 0.003
    before = dendropy_root_distances(read_dendropy(text))
    after = dendropy_root_distances(read_dendropy(to_newick(result)))
    assert after["A"] == pytest.approx(before["A"] + 0.003)
    assert after["C"] == pytest.approx(0.003)
    assert after["D"] == pytest.approx(before["D"]) and after["E"] == pytest.approx(before["E"])


def test_sorted_children_are_one_text_for_one_tree() -> None:
    written = "((C:1,(B:1,A:1):1):1,((E:1,D:1):1,F:2):1,G:3);"
    reordered = "(G:3,(F:2,(D:1,E:1):1):1,((A:1,B:1):1,C:1):1);"
    a = to_newick(children_sorted(parse_newick(written)))
    assert a == to_newick(children_sorted(parse_newick(reordered)))
    assert a == "(G:3.0,(C:1.0,(A:1.0,B:1.0):1.0):1.0,(F:2.0,(D:1.0,E:1.0):1.0):1.0);"
    reads_back_the_same(parse_newick(a), dendropy_distances(read_dendropy(written)))


# DendroPy refuses duplicate taxa ("awkward labels"), a finding tested apart.
READABLE = sorted(set(GALLERY) - {"no lengths", "awkward labels"})


@pytest.mark.parametrize("name", READABLE)
def test_every_edit_writes_trees_dendropy_reads_back(name: str) -> None:
    tree = parse_newick(GALLERY[name])
    depths = ref_depths(tree)
    for result in (
        polytomies_resolved(tree),
        short_branches_collapsed(tree, 0.5),
        children_sorted(tree),
        made_ultrametric(tree, force=True),
    ):
        dendro = read_dendropy(to_newick(result))
        assert sorted(t.label for t in dendro.taxon_namespace) == sorted(tree.tip_labels)
    # distance-keeping edits keep the root-to-tip distances
    for result in (polytomies_resolved(tree), children_sorted(tree)):
        got = dict(zip(result.tip_labels, result.depths()[result.tips], strict=True))
        want = {tree.labels[t]: depths[t] for t in tree.tips}
        assert got == pytest.approx(want)


# --- stored repairs ---


def _add_set(store: Store, texts: list[str]) -> int:
    with store.transaction() as session:
        tree_set = TreeSet(name="sample", tree_count=0)
        session.add(tree_set)
        session.flush()
        for k, text in enumerate(texts):
            add_tree(session, tree_set, parse_newick(text), index_in_file=k, newick=text)
        return tree_set.id


def _counts(store: Store) -> tuple[int, int, int]:
    with store.reading() as session:
        return (
            int(session.scalar(select(func.count(LedgerEvent.id))) or 0),
            int(session.scalar(select(func.count(TreeSet.id))) or 0),
            int(session.scalar(select(func.count(Tree.id))) or 0),
        )


POSTERIOR = [
    "((A:1,B:1,C:1):1,D:2);",
    "((A:1,B:1):1,(C:1,D:1):1);",
    "(((A:1,B:1):0,C:1):1,D:2);",
    # zero-length tips A and B, off ultrametric by rounding (2.01 against 2)
    "((A:0,B:0):2.01,(C:1,D:1):1);",
]


def test_each_repair_makes_a_derived_set_with_one_event(store: Store) -> None:
    set_id = _add_set(store, POSTERIOR)
    repairs = [
        ("prune-trees", lambda: prune_trees(store, set_id, tips=["A", "B", "D"])),
        ("resolve-polytomies", lambda: resolve_polytomies(store, set_id, seed=3)),
        ("collapse-short-branches", lambda: collapse_short_branches(store, set_id, threshold=0.5)),
        ("make-ultrametric", lambda: make_ultrametric(store, set_id)),
        ("lengthen-zero-tips", lambda: lengthen_zero_tips(store, set_id, length=1e-3)),
        ("sort-children", lambda: sort_children(store, set_id)),
    ]
    for action, run in repairs:
        events, sets, trees = _counts(store)
        report = run()
        assert report.changed and report.trees == len(POSTERIOR)
        assert _counts(store) == (events + 1, sets + 1, trees + len(POSTERIOR))
        with store.reading() as session:
            event = session.get(LedgerEvent, report.event_id)
            assert event is not None and event.action == action
            assert event.parameters["tree_set_id"] == set_id
            assert event.parameters["derived_tree_set_id"] == report.derived_tree_set_id
            assert event.parameters["trees_changed"] == report.trees_changed >= 1
            derived = session.get(TreeSet, report.derived_tree_set_id)
            stored = load_tree_set(session, derived.id)
            originals = load_tree_set(session, set_id)
        assert derived.derived_from_id == set_id and derived.repair == action
        assert [t.derived_from_id for t, _ in stored] == [t.id for t, _ in originals]
        assert [t.newick for t, _ in originals] == POSTERIOR  # the original is untouched
    with store.reading() as session:
        resolved = session.scalars(
            select(TreeSet).where(TreeSet.repair == "resolve-polytomies")
        ).one()
        for _tree, arrays in load_tree_set(session, resolved.id):
            assert arrays.child_count.max() == 2


def test_repairing_one_tree(store: Store) -> None:
    set_id = _add_set(store, POSTERIOR)
    with store.reading() as session:
        first = session.scalars(select(Tree.id).where(Tree.tree_set_id == set_id)).first()
    report = resolve_polytomies(store, tree_id=first)
    assert report.trees == report.trees_changed == 1
    with store.reading() as session:
        assert session.get(TreeSet, report.derived_tree_set_id).tree_count == 1


def test_bad_repairs_change_nothing(store: Store) -> None:
    set_id = _add_set(store, POSTERIOR)
    before = _counts(store)
    with pytest.raises(NotFoundError, match="no tree 999"):
        sort_children(store, tree_id=999)
    with pytest.raises(NotFoundError, match="no tree set 999"):
        prune_trees(store, 999, tips=["A"])
    with pytest.raises(InputError, match="threshold -1"):
        collapse_short_branches(store, set_id, threshold=-1)
    with pytest.raises(InputError, match="not in the tree"):
        prune_trees(store, set_id, tips=["A", "Nope"])
    with pytest.raises(InputError, match="tolerance"):
        make_ultrametric(store, set_id, tolerance=-0.5)
    assert _counts(store) == before
    fossil = _add_set(store, [GALLERY["fossil tip"]])
    before = _counts(store)
    with pytest.raises(ConflictError, match="substantively"):
        make_ultrametric(store, fossil)
    assert _counts(store) == before
    make_ultrametric(store, fossil, force=True)
    assert _counts(store) == (before[0] + 1, before[1] + 1, before[2] + 1)


# --- a repair that changes nothing stores nothing ---

CLEAN = ["((A:1,B:1):1,(C:1,D:1):1);", "((A:1,B:1):1.5,(C:2,D:2):0.5);"]


def test_a_repair_that_changes_nothing_stores_nothing_and_says_why(store: Store) -> None:
    set_id = _add_set(store, CLEAN)
    sorted_set = _add_set(store, [to_newick(children_sorted(parse_newick(t))) for t in CLEAN])
    before = _counts(store)
    for report, why in [
        (lengthen_zero_tips(store, set_id), "no terminal branch is zero"),
        (make_ultrametric(store, set_id), "ultrametric already"),
        (resolve_polytomies(store, set_id), "more than two children"),
        (collapse_short_branches(store, set_id, threshold=0.1), "shorter than 0.1"),
        (prune_trees(store, set_id, tips=["A", "B", "C", "D"]), "exactly these tips"),
        (sort_children(store, sorted_set), "in order already"),
    ]:
        assert not report.changed, report.repair
        assert report.trees == 2 and report.trees_changed == 0
        assert report.derived_tree_set_id is None and report.event_id is None
        assert report.message.startswith("Nothing changed") and why in report.message
        assert "nothing was recorded" in report.message
    assert _counts(store) == before


def _cli_counts(path: Path) -> tuple[int, int, int]:
    with create_store(path) as opened:
        return _counts(opened)


def test_repairs_that_change_nothing_say_so_on_the_command_line(tmp_path: Path) -> None:
    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        set_id = _add_set(opened, CLEAN)
    before = _cli_counts(path)
    for command in ("lengthen-zero-tips", "make-ultrametric"):
        done = run_cli(command, str(set_id), "--store", str(path))
        assert done.returncode == 0, done.stdout + done.stderr
        assert "Nothing changed" in done.stdout and "Derived" not in done.stdout
        assert _cli_counts(path) == before


# Every tip at 40; the sister tips Aa_a and Bb_b are 0.0002 from their
# parent, below 1e-5 of the height (0.0004): near zero.
NEAR_ZERO_PAIR = "((Aa_a:0.0002,Bb_b:0.0002):39.9998,(Cc_c:20,Dd_d:20):20);"


def _derived_newick(path: Path, derived_from: int) -> str:
    with create_store(path) as opened, opened.reading() as session:
        derived = session.scalars(
            select(TreeSet.id)
            .where(TreeSet.derived_from_id == derived_from)
            .order_by(TreeSet.id.desc())
        ).first()
        ((tree, _arrays),) = load_tree_set(session, derived)
    return tree.newick


def test_lengthen_zero_tips_lengthens_near_zero_tips_on_the_command_line(
    tmp_path: Path,
) -> None:
    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        set_id = _add_set(opened, [NEAR_ZERO_PAIR])
    original = read_dendropy(NEAR_ZERO_PAIR)
    height = max(dendropy_root_distances(original).values())  # DendroPy: 40
    done = run_cli("lengthen-zero-tips", str(set_id), "--store", str(path))
    assert done.returncode == 0, done.stdout + done.stderr
    assert "1 of 1 trees changed" in done.stdout
    repaired = read_dendropy(_derived_newick(path, set_id))
    # Root-to-tip distances are kept (DendroPy), the two tips now 0.001 of
    # the height from their parent, and the check no longer finds them.
    assert dendropy_root_distances(repaired) == pytest.approx(
        dendropy_root_distances(original), abs=1e-9
    )
    tips = {leaf.taxon.label: leaf.edge.length for leaf in repaired.leaf_node_iter()}
    assert tips["Aa_a"] == tips["Bb_b"] == pytest.approx(0.001 * height)
    assert "tree.zero_length_terminal" not in codes(parse_newick(_derived_newick(path, set_id)))
    alone = run_cli(
        "lengthen-zero-tips",
        str(set_id),
        "--length",
        "0.5",
        "--lengthen-only",
        "--store",
        str(path),
    )
    assert alone.returncode == 0, alone.stdout + alone.stderr
    assert "2 lengthened tips now end further from the root" in alone.stdout
    moved = dendropy_root_distances(read_dendropy(_derived_newick(path, set_id)))
    assert moved["Aa_a"] == pytest.approx(39.9998 + 0.5)


def test_lengthen_zero_tips_refuses_a_length_that_is_itself_near_zero(tmp_path: Path) -> None:
    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        set_id = _add_set(opened, [NEAR_ZERO_PAIR])
    before = _cli_counts(path)
    done = run_cli("lengthen-zero-tips", str(set_id), "--length", "1e-6", "--store", str(path))
    output = done.stdout + done.stderr
    assert done.returncode == 2, output
    assert "itself near zero" in output and "Traceback" not in output
    assert _cli_counts(path) == before
