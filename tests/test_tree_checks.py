"""Checks of trees: hand-built trees for every finding, the fast array code
beside slow recursive references over the gallery, DendroPy as the outside
reference for distances and ultrametricity, and checks of stored tree sets."""

from __future__ import annotations

from pathlib import Path

import dendropy
import numpy as np
import pytest
from sqlalchemy import func, select
from tree_gallery import (
    GALLERY,
    ROUNDING_GALLERY,
    dendropy_root_distances,
    random_newick,
    read_dendropy,
    ref_depths,
    ref_subjects,
    ref_subtree_sizes,
)

from curation.errors import InputError, NotFoundError
from curation.store import Store, create_store
from curation.store.models import LedgerEvent, StoredFinding, Tree, TreeSet
from curation.trees.arrays import TreeArrays, parse_newick
from curation.trees.checks import (
    DEFAULT_NEAR_ZERO,
    check_tree,
    check_trees,
    measure_ultrametricity,
    tree_findings,
)
from curation.trees.edits import children_sorted
from curation.trees.nodes import name_nodes
from curation.trees.stored import add_tree, load_tree_set
from tests.test_cli import run_cli


def codes(newick: str, **options: object) -> list[str]:
    return sorted(f.code for f in check_tree(parse_newick(newick), **options))  # type: ignore[arg-type]


# --- the fast code beside the slow references, over the named gallery ---


@pytest.mark.parametrize("name", sorted(GALLERY))
def test_depths_match_recursive_reference(name: str) -> None:
    tree = parse_newick(GALLERY[name])
    assert np.allclose(tree.depths(), ref_depths(tree), rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", sorted(GALLERY))
def test_node_names_match_recursive_reference(name: str) -> None:
    tree = parse_newick(GALLERY[name])
    names = name_nodes(tree)
    assert names.subjects(np.arange(tree.node_count)) == ref_subjects(tree)
    sizes = ref_subtree_sizes(tree)
    assert (names.ends - np.arange(tree.node_count)).tolist() == sizes


@pytest.mark.parametrize("seed", range(5))
def test_node_names_match_reference_on_random_trees(seed: int) -> None:
    tree = parse_newick(random_newick(60, seed, polytomy_chance=0.2))
    names = name_nodes(tree)
    assert names.subjects(np.arange(tree.node_count)) == ref_subjects(tree)


def test_node_names_survive_reordering_and_rereading() -> None:
    # The same tree written with children in another order: every finding's
    # subject must stay the same.
    written = "((C:1,(B:1,A:1):1):1,((E:1,D:1):1,F:2):1,G:3);"
    reordered = "(G:3,(F:2,(D:1,E:1):1):1,((A:1,B:1):1,C:1):1);"

    def subjects(tree: TreeArrays) -> set[str]:
        return set(name_nodes(tree).subjects(np.arange(tree.node_count)))

    first = subjects(parse_newick(written))
    assert len(first) == 12  # 7 tips and 5 internal nodes
    assert subjects(parse_newick(reordered)) == first
    assert subjects(children_sorted(parse_newick(written))) == first


# --- hand-built trees, one per finding, degenerate ones included ---


def test_one_tip_has_no_findings() -> None:
    # A
    assert codes(GALLERY["one tip"]) == []


def test_two_tips_ultrametric_has_no_findings() -> None:
    assert codes(GALLERY["two tips"]) == []


def test_star_tree_is_a_polytomy() -> None:
    findings = check_tree(parse_newick(GALLERY["star"]))
    assert [f.code for f in findings] == ["tree.polytomy"]
    assert findings[0].details["children"] == 4
    assert findings[0].subject == "node 'A' + 'D' (4 tips)"


def test_all_zero_lengths() -> None:
    # ((A:0,B:0):0,(C:0,D:0):0): four zero tips, two zero internal branches;
    # a tree of height 0 is trivially ultrametric.
    found = codes(GALLERY["all zero lengths"])
    assert found.count("tree.zero_length_terminal") == 4
    assert found.count("tree.zero_length_internal") == 2
    assert "tree.not_ultrametric" not in found


def test_no_lengths_at_all_versus_some() -> None:
    assert "tree.no_branch_lengths" in codes(GALLERY["no lengths"])
    some = check_tree(parse_newick("((A:1,B),C:2);"))
    missing = [f for f in some if f.code == "tree.missing_branch_lengths"]
    assert missing and missing[0].details["missing"] == 2  # B and (A,B)
    assert "tree.no_branch_lengths" not in [f.code for f in some]


def test_polytomy_below_the_root() -> None:
    findings = check_tree(parse_newick(GALLERY["polytomy"]))
    assert [f.code for f in findings] == ["tree.polytomy"]
    assert findings[0].subject == "node 'A' + 'C' (3 tips)"


def test_basal_trifurcation_depends_on_rooting() -> None:
    # ((A,B),C,D): three children at the root.
    text = GALLERY["basal trifurcation"]
    assert codes(text) == ["tree.basal_trifurcation"]  # silent file: taken as rooted
    assert codes(text, expect_rooted=False) == []
    assert codes("[&U] " + text) == []
    assert codes("[&U] " + text, expect_rooted=True) == ["tree.basal_trifurcation"]
    assert codes("[&R] (A:1,B:1,C:1,D:1);") == ["tree.polytomy"]


def test_single_child_node() -> None:
    findings = check_tree(parse_newick(GALLERY["single child"]))
    assert [f.code for f in findings] == ["tree.single_child_node"]
    assert findings[0].subject == "node 'B' (1 tip)"


def test_zero_length_terminal_and_internal_apart() -> None:
    found = codes("((A:0,B:1):0,C:1);")
    assert found.count("tree.zero_length_terminal") == 1
    assert found.count("tree.zero_length_internal") == 1


def test_labels_negative_and_duplicates() -> None:
    # (('Aus bus',B_c),('D''e',B_c:-0.5))
    findings = check_tree(parse_newick(GALLERY["awkward labels"]))
    by_code: dict[str, list[str]] = {}
    for f in findings:
        by_code.setdefault(f.code, []).append(f.subject)
    assert by_code["tree.duplicate_label"] == ["tip 'B_c'"]
    assert sorted(by_code["tree.label_needs_quotes"]) == sorted(["tip 'Aus bus'", 'tip "D\'e"'])
    assert by_code["tree.negative_length"] == ["tip 'B_c'"]
    assert codes("((A:1,:1):1,C:2);").count("tree.empty_label") == 1


def test_long_branch_outlier() -> None:
    findings = [f for f in check_tree(parse_newick(GALLERY["long branch"])) if "outlier" in f.code]
    assert [f.subject for f in findings] == ["tip 'H'"]
    # Modified z-score of Iglewicz and Hoaglin (1993): 0.6745 (x - median) / MAD
    # on log10 lengths; here the median is 0 and the MAD is floored at 0.2.
    assert findings[0].details["modified_z"] == pytest.approx(0.6745 * 3 / 0.2)
    assert codes(GALLERY["caterpillar"]) == []


def test_fossil_tip_is_substantive_and_rounding_is_not() -> None:
    fossil = [f for f in check_tree(parse_newick(GALLERY["fossil tip"])) if "ultra" in f.code]
    assert fossil[0].details["verdict"] == "substantive"
    assert fossil[0].details["spread"] == pytest.approx(1.5)
    # ((A:0.33,B:0.33):0.67,C:1.0): A at 1.00, C at 1.0 - ultrametric as written.
    rounded = "((A:0.33,B:0.33):0.66,C:1.0);"  # A at 0.99: off by 0.01, two decimals
    found = [f for f in check_tree(parse_newick(rounded)) if "ultra" in f.code]
    assert found[0].details["verdict"] == "rounding-level"
    # The same deviation written with three decimals cannot be rounding.
    precise = "((A:0.330,B:0.330):0.660,C:1.000);"
    found = [f for f in check_tree(parse_newick(precise)) if "ultra" in f.code]
    assert found[0].details["verdict"] == "substantive"


def test_bad_options_are_refused_with_the_option_named() -> None:
    tree = parse_newick(GALLERY["two tips"])
    with pytest.raises(InputError, match=r"tolerance -0\.1") as info:
        check_tree(tree, tolerance=-0.1)
    assert "--tolerance" in str(info.value)
    with pytest.raises(InputError, match="--outlier-threshold"):
        check_tree(tree, outlier_threshold=0)


# --- DendroPy as the outside reference ---


def _birth_death(seed: int, tips: int = 40) -> dendropy.Tree:
    # DendroPy's own simulator (Sukumaran and Holder 2010) makes the trees
    # here, so they do not come from our generator.
    rng = __import__("random").Random(seed)
    return dendropy.simulate.treesim.birth_death_tree(
        birth_rate=1.0, death_rate=0.0, num_extant_tips=tips, rng=rng
    )


@pytest.mark.parametrize("seed", range(6))
def test_root_to_tip_distances_agree_with_dendropy(seed: int) -> None:
    text = random_newick(50, seed, ultrametric=False)
    ours = parse_newick(text)
    depths = ours.depths()
    theirs = dendropy_root_distances(read_dendropy(text))
    assert {ours.labels[t]: pytest.approx(depths[t], abs=1e-12) for t in ours.tips} == theirs


@pytest.mark.parametrize("seed", range(8))
def test_ultrametric_verdict_agrees_with_dendropy_node_ages(seed: int) -> None:
    rng = np.random.default_rng(seed)
    simulated = _birth_death(seed)
    text = simulated.as_string(schema="newick", suppress_rooting=True).strip()
    tree = read_dendropy(text)
    leaves = list(tree.leaf_node_iter())
    precision = 1e-5  # DendroPy's default ultrametricity precision
    # One tip moved by less or more than the precision: DendroPy's node
    # ages (calc_node_ages) must fail exactly when our spread exceeds it.
    delta = float(rng.choice([0.3, 0.8, 1.5, 3.0])) * precision
    leaves[int(rng.integers(len(leaves)))].edge.length += delta
    moved = tree.as_string(schema="newick", suppress_rooting=True).strip()
    ours = parse_newick(moved)
    height = measure_ultrametricity(ours)["height"]
    flagged = any(
        f.code == "tree.not_ultrametric" for f in check_tree(ours, tolerance=precision / height)
    )
    try:
        read_dendropy(moved).calc_node_ages(ultrametricity_precision=precision)
        dendropy_says_ultrametric = True
    except ValueError:
        dendropy_says_ultrametric = False
    assert flagged == (not dendropy_says_ultrametric)
    assert flagged == (delta > precision)


@pytest.mark.parametrize("seed", range(6))
def test_spread_equals_dendropy_oldest_minus_youngest_root_age(seed: int) -> None:
    text = random_newick(40, seed, ultrametric=False)
    report = measure_ultrametricity(parse_newick(text))
    # DendroPy's calc_node_ages with is_force_max_age sets the root to the
    # longest root-to-tip path, with is_force_min_age to the shortest.
    oldest = read_dendropy(text)
    oldest.calc_node_ages(is_force_max_age=True)
    youngest = read_dendropy(text)
    youngest.calc_node_ages(is_force_min_age=True)
    spread = oldest.seed_node.age - youngest.seed_node.age
    assert report["spread"] == pytest.approx(spread, rel=1e-12)
    assert report["height"] == pytest.approx(oldest.seed_node.age, rel=1e-12)


@pytest.mark.parametrize("seed", range(4))
def test_rounded_ultrametric_tree_is_rounding_level(seed: int) -> None:
    # An ultrametric tree written with 3 decimals: any spread comes from
    # rounding, and DendroPy accepts it at a precision of the allowance.
    text = random_newick(80, seed, decimals=3)
    tree = parse_newick(text)
    report = measure_ultrametricity(tree)
    assert report["verdict"] in ("ultrametric", "rounding-level")
    read_dendropy(text).calc_node_ages(ultrametricity_precision=2 * report["rounding_allowance"])


# --- stored tree sets ---


def _add_set(store: Store, texts: list[str], name: str = "posterior") -> int:
    with store.transaction() as session:
        tree_set = TreeSet(name=name, tree_count=0)
        session.add(tree_set)
        session.flush()
        for k, text in enumerate(texts):
            add_tree(session, tree_set, parse_newick(text), index_in_file=k, newick=text)
        return tree_set.id


def _events(store: Store) -> int:
    with store.reading() as session:
        return int(session.scalar(select(func.count(LedgerEvent.id))) or 0)


def test_check_trees_counts_trees_per_finding(store: Store) -> None:
    texts = [
        "((A:1,B:1,C:1):1,D:2);",  # polytomy
        "((A:1,B:1):1,(C:1,D:1):1);",
        "((A:1,B:1,C:1):1,E:2);",  # polytomy, and E instead of D
    ]
    set_id = _add_set(store, texts)
    report = check_trees(store, set_id)
    assert report.counts["tree.polytomy"] == 2
    assert "2 of 3 trees have polytomies" in report.sentences
    polytomy = [f for f in report.findings if f.code == "tree.polytomy"]
    assert len(polytomy) == 1 and polytomy[0].details["tree_indices"] == [0, 2]
    not_shared = sorted(f.subject for f in report.findings if f.code == "tree.tips_not_shared")
    assert not_shared == ["tip 'D'", "tip 'E'"]
    with store.reading() as session:
        events = session.scalars(
            select(LedgerEvent).where(LedgerEvent.action == "check-trees")
        ).all()
        assert len(events) == 1
        stored = session.scalar(
            select(func.count(StoredFinding.id)).where(StoredFinding.event_id == events[0].id)
        )
    assert stored == len(report.findings)
    shown = tree_findings(store, set_id)
    assert sorted(shown["code"]) == sorted(f.code for f in report.findings)


def test_check_one_stored_tree(store: Store) -> None:
    _add_set(store, ["((A:1,B:1):1,C:2);", "(A:1,B:1,C:1,D:1);"])
    with store.reading() as session:
        second = session.scalars(select(Tree.id).where(Tree.index_in_file == 1)).one()
    report = check_trees(store, tree_id=second)
    assert [f.code for f in report.findings] == ["tree.polytomy"]
    assert report.findings[0].details["tree_id"] == second


def test_check_trees_bad_input_changes_nothing(store: Store) -> None:
    set_id = _add_set(store, ["((A:1,B:1):1,C:2);"])
    before = _events(store)
    with pytest.raises(NotFoundError, match="no tree set 999"):
        check_trees(store, 999)
    with pytest.raises(NotFoundError, match="no tree 999"):
        check_trees(store, tree_id=999)
    with pytest.raises(InputError, match="tolerance"):
        check_trees(store, set_id, tolerance=-1e-3)
    assert _events(store) == before


# --- the rounding judgement over written decimals ---


def _dendropy_spread_and_height(text: str) -> tuple[float, float]:
    # DendroPy's node ages (Sukumaran and Holder 2010): with is_force_max_age
    # the root's age is the longest root-to-tip path, with is_force_min_age
    # the shortest.
    oldest = read_dendropy(text)
    oldest.calc_node_ages(is_force_max_age=True)
    youngest = read_dendropy(text)
    youngest.calc_node_ages(is_force_min_age=True)
    return oldest.seed_node.age - youngest.seed_node.age, oldest.seed_node.age


@pytest.mark.parametrize("name", sorted(ROUNDING_GALLERY))
def test_rounding_verdict_weighs_the_spread_against_the_height(name: str) -> None:
    text, verdict = ROUNDING_GALLERY[name]
    report = measure_ultrametricity(parse_newick(text))
    spread, height = _dendropy_spread_and_height(text)
    assert report["spread"] == pytest.approx(spread, rel=1e-9, abs=1e-12)
    assert report["height"] == pytest.approx(height, rel=1e-12)
    assert report["verdict"] == verdict, report
    if verdict == "rounding-level":
        # DendroPy accepts the tree as ultrametric at the precision of the
        # written decimals (twice the largest path allowance).
        read_dendropy(text).calc_node_ages(
            ultrametricity_precision=2 * report["rounding_allowance"]
        )


def test_whole_number_lengths_do_not_pass_a_real_deviation_off_as_rounding() -> None:
    # A spread of 2 on a height of 15 (13%): each path's allowance (two
    # whole numbers, +-0.5 each) could cover it, but no rounding spreads
    # tips that far.
    text, _ = ROUNDING_GALLERY["integers, substantive"]
    found = [f for f in check_tree(parse_newick(text)) if f.code == "tree.not_ultrametric"]
    assert found[0].details["verdict"] == "substantive"
    assert found[0].details["reason"] == "share"
    assert "too few decimals" in found[0].message


def test_make_ultrametric_refuses_substantive_deviations_on_the_command_line(
    tmp_path: Path,
) -> None:
    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        ids = {name: _add_set(opened, [text], name) for name, (text, _) in ROUNDING_GALLERY.items()}

    def counts() -> tuple[int, int, int]:
        with create_store(path) as opened, opened.reading() as session:
            return tuple(  # type: ignore[return-value]
                int(session.scalar(select(func.count(model.id))) or 0)
                for model in (LedgerEvent, TreeSet, Tree)
            )

    for name, (_text, verdict) in sorted(ROUNDING_GALLERY.items()):
        before = counts()
        done = run_cli("make-ultrametric", str(ids[name]), "--store", str(path))
        output = done.stdout + done.stderr
        assert "Traceback" not in output, name
        if verdict == "substantive":
            assert done.returncode == 2, (name, output)
            assert "substantive" in output and "--force" in output, name
            assert counts() == before, name
            continue
        assert done.returncode == 0, (name, output)
        assert "Derived tree set" in done.stdout, name
        with create_store(path) as opened, opened.reading() as session:
            derived = session.scalars(
                select(TreeSet.id).where(TreeSet.derived_from_id == ids[name])
            ).one()
            ((tree, _arrays),) = load_tree_set(session, derived)
        # DendroPy finds the repaired tree ultrametric at 1e-9.
        read_dendropy(tree.newick).calc_node_ages(ultrametricity_precision=1e-9)


# --- zero and near-zero branches ---

# Every tip at 40. The sister tips Aa_a and Bb_b have terminal branches of
# 0.0002 and the branch above (Aa_a, Bb_b, Ee_e) is 0.0001, all below 1e-5
# of the height (0.0004); Ff_f and Gg_g have terminal branches of exactly
# 0 and (Cc_c, Dd_d) an internal branch of exactly 0.
#
#         +-- Aa_a 0.0002
#     +---+ 19.9998
#   +-+   +-- Bb_b 0.0002
#   | |   0.0001 above (Aa_a, Bb_b, Ee_e)
#   | +-- Ee_e 20
# +-+ 19.9999
# | +-- Hh_h 20.0001
# +
# |   +-- Ff_f 0, Gg_g 0  (their parent 30 below)
# +---+ 10
#     +-- (Cc_c 30, Dd_d 30) on a branch of 0
NEAR_ZERO_TREE = (
    "((((Aa_a:0.0002,Bb_b:0.0002):19.9998,Ee_e:20):0.0001,Hh_h:20.0001):19.9999,"
    "((Ff_f:0,Gg_g:0):30,(Cc_c:30,Dd_d:30):0):10);"
)


def _dendropy_short_branches(text: str, share: float) -> tuple[set[str], int]:
    """Tips on branches shorter than share x height (or exactly 0), and the
    number of such internal branches, by DendroPy's edge lengths and
    root-to-tip distances."""
    tree = read_dendropy(text)
    height = max(dendropy_root_distances(tree).values())
    cutoff = share * height
    tips = {
        node.taxon.label
        for node in tree.leaf_node_iter()
        if node.edge.length == 0 or node.edge.length < cutoff
    }
    internal = sum(
        1
        for node in tree.preorder_internal_node_iter(exclude_seed_node=True)
        if node.edge.length == 0 or node.edge.length < cutoff
    )
    return tips, internal


def test_near_zero_branches_are_found_on_the_command_line(tmp_path: Path) -> None:
    path = tmp_path / "lab.db"
    with create_store(path) as opened:
        set_id = _add_set(opened, [NEAR_ZERO_TREE])
    for share in (DEFAULT_NEAR_ZERO, 0.0):
        args = ["check-trees", str(set_id), "--store", str(path)]
        if share != DEFAULT_NEAR_ZERO:
            args += ["--near-zero", str(share)]
        done = run_cli(*args)
        assert done.returncode == 0, done.stdout + done.stderr
        with create_store(path) as opened:
            found = tree_findings(opened, set_id)
        terminal = found[found["code"] == "tree.zero_length_terminal"]
        internal = found[found["code"] == "tree.zero_length_internal"]
        tips, internal_count = _dendropy_short_branches(NEAR_ZERO_TREE, share)
        assert set(terminal["subject"]) == {f"tip {t!r}" for t in tips}
        assert len(internal) == internal_count
        if share:
            assert tips == {"Aa_a", "Bb_b", "Ff_f", "Gg_g"} and internal_count == 2
            assert "too short to be real" in " ".join(terminal["message"])
        else:
            assert tips == {"Ff_f", "Gg_g"} and internal_count == 1  # exact zeros only
    refused = run_cli("check-trees", str(set_id), "--near-zero", "2", "--store", str(path))
    assert refused.returncode == 2 and "--near-zero" in refused.stdout + refused.stderr
