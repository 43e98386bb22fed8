"""Importing tree files: Newick, NEXUS and NeXML, checked against DendroPy
and against the formats' published descriptions.

Outside references used here:
- DendroPy (Sukumaran and Holder 2010) reads every file a second time, with
  ``preserve_underscores=True`` (our label policy), as the reference.
- The Newick rules adopted in 1986 by Felsenstein, Archie, Day, Maddison,
  Meacham, Rohlf and Swofford ("the Newick format", published with
  PHYLIP). The rules are quoted from memory beside each check.
- The NEXUS description of Maddison, Swofford and Maddison (1997,
  Systematic Biology 46: 590-621) for TAXA, TRANSLATE and TREE.
- Published trees shipped with the DendroPy 4.6.1 source distribution, in
  tests/data/trees (see its README): the bird orders of Sibley and Ahlquist
  (1990) and a tree of pythons.
"""

from __future__ import annotations

import os
import random
import subprocess
import sys
from pathlib import Path

import dendropy
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from curation.errors import ConflictError, FormatError, InputError, NotFoundError
from curation.formats.newick import _relabel_tips_slowly, relabel_tips, split_newick
from curation.imports.common import SourceInfo
from curation.imports.trees import guess_tree_format, import_trees, read_tree_file
from curation.store import Store, create_store, open_store
from curation.store.models import LedgerEvent, Source, Tip, Tree, TreeSet
from curation.trees.arrays import TreeArrays, parse_newick, quote_label, to_newick
from curation.trees.stored import load_tree_set

ROOT = Path(__file__).resolve().parent.parent
DATA = Path(__file__).resolve().parent / "data" / "trees"
TABLES = [Source, TreeSet, Tree, Tip, LedgerEvent]


def row_counts(store: Store) -> dict[str, int]:
    """Rows in every table an import writes to."""
    with store.reading() as session:
        return {
            model.__tablename__: int(session.scalar(select(func.count()).select_from(model)) or 0)
            for model in TABLES
        }


def write(folder: Path, name: str, content: str | bytes) -> Path:
    path = folder / name
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


def reference_trees(path: Path, schema: str) -> dendropy.TreeList:
    """The file read by DendroPy, with our label policy where it applies."""
    if schema == "nexml":
        return dendropy.TreeList.get(path=str(path), schema="nexml")
    return dendropy.TreeList.get(path=str(path), schema=schema, preserve_underscores=True)


def reference_tips(tree: dendropy.Tree) -> list[tuple[str, float | None, float]]:
    """(label, branch length, distance from the root) of each tip, in order."""
    tree.calc_node_root_distances(return_leaf_distances_only=False)
    return [
        (leaf.taxon.label, leaf.edge.length, leaf.root_distance) for leaf in tree.leaf_node_iter()
    ]


def our_tips(arrays: TreeArrays) -> list[tuple[str, float | None, float]]:
    depths = arrays.depths()
    return [
        (
            arrays.labels[i],
            None if np.isnan(arrays.edge_length[i]) else float(arrays.edge_length[i]),
            float(depths[i]),
        )
        for i in arrays.tips
    ]


def assert_same_as_dendropy(path: Path, schema: str, stored: list[TreeArrays]) -> None:
    reference = reference_trees(path, schema)
    assert len(stored) == len(reference)
    for ours, theirs in zip(stored, reference, strict=True):
        mine = our_tips(ours)
        expected = reference_tips(theirs)
        assert [m[0] for m in mine] == [e[0] for e in expected]
        for (_, length, depth), (_, ref_length, ref_depth) in zip(mine, expected, strict=True):
            assert (length is None) == (ref_length is None)
            if length is not None:
                assert length == pytest.approx(ref_length, rel=1e-12, abs=1e-12)
            assert depth == pytest.approx(ref_depth, rel=1e-9, abs=1e-12)
        # Internal branch lengths too, as a multiset.
        inner = sorted(
            float(x)
            for x, tip in zip(ours.edge_length, ours.is_tip, strict=True)
            if not tip
            if not np.isnan(x)
        )
        ref_inner = sorted(
            e.length
            for e in theirs.postorder_edge_iter()
            if e.length is not None and not e.head_node.is_leaf()
        )
        assert inner == pytest.approx(ref_inner)


def stored_arrays(store: Store, tree_set_id: int) -> list[TreeArrays]:
    with store.reading() as session:
        return [arrays for _, arrays in load_tree_set(session, tree_set_id)]


# --- the published trees ---------------------------------------------------


@pytest.mark.parametrize(
    ("name", "schema", "trees", "tips"),
    [
        ("bird_orders.newick", "newick", 1, 23),
        ("bird_orders.nex", "nexus", 1, 23),
        ("pythonidae.mle.nex", "nexus", 1, 33),
        ("primates.trees.nexus", "nexus", 2, 12),
    ],
)
def test_published_trees_round_trip_like_dendropy(
    store: Store, name: str, schema: str, trees: int, tips: int
) -> None:
    result = import_trees(store, DATA / name)
    assert result.format == schema
    assert result.counts["trees_stored"] == trees
    stored = stored_arrays(store, result.tree_set_id)
    assert [len(a.tip_labels) for a in stored] == [tips] * trees
    # DendroPy 4.6.1's copy of each file, read by DendroPy: same tips in the
    # same order, same branch lengths, same distances from the root.
    assert_same_as_dendropy(DATA / name, schema, stored)


@pytest.mark.parametrize("name", ["bird_orders.newick", "bird_orders.nex"])
def test_bird_orders_are_ultrametric_with_root_age_28(store: Store, name: str) -> None:
    result = import_trees(store, DATA / name)
    (arrays,) = stored_arrays(store, result.tree_set_id)
    depths = arrays.depths()[arrays.tips]
    # Sibley and Ahlquist (1990) bird orders as shipped by DendroPy 4.6.1:
    # 23 orders, ultrametric, root age 28.0 (Delta T50H units).
    assert len(depths) == 23
    assert depths == pytest.approx(np.full(23, 28.0), abs=1e-9)
    assert arrays.rooted is True  # the file says [&R]
    assert "Passeriformes" in arrays.tip_labels


def test_bird_orders_nexus_translate_gives_the_newick_labels(store: Store) -> None:
    newick = import_trees(store, DATA / "bird_orders.newick")
    nexus = import_trees(store, DATA / "bird_orders.nex")
    (a,) = stored_arrays(store, newick.tree_set_id)
    (b,) = stored_arrays(store, nexus.tree_set_id)
    # The two files of the same published tree: TRANSLATE turns 1..23 into
    # the order names (Maddison, Swofford and Maddison 1997).
    assert a.tip_labels == b.tip_labels
    assert np.allclose(a.edge_length[1:], b.edge_length[1:])


def test_pythons_keep_underscores_and_are_unrooted(store: Store) -> None:
    result = import_trees(store, DATA / "pythonidae.mle.nex")
    (arrays,) = stored_arrays(store, result.tree_set_id)
    assert arrays.rooted is False  # [&U] in the file
    assert "Python_regius" in arrays.tip_labels  # our policy: underscores kept
    # DendroPy, told to keep underscores, agrees; by the NEXUS rule it would
    # read a blank (Maddison, Swofford and Maddison 1997).
    plain = dendropy.Tree.get(path=str(DATA / "pythonidae.mle.nex"), schema="nexus")
    assert "Python regius" in [t.label for t in plain.taxon_namespace]


def test_python_distances_match_the_published_matrix(store: Store) -> None:
    import pandas as pd

    result = import_trees(store, DATA / "pythonidae.mle.nex")
    (arrays,) = stored_arrays(store, result.tree_set_id)
    matrix = pd.read_csv(DATA / "pythonidae.mle.weighted.pdm.csv", index_col=0)
    depths = arrays.depths()
    # Distance between two tips = depth(a) + depth(b) - 2 depth(their
    # common ancestor); a few pairs against the matrix computed by other
    # software and shipped with DendroPy 4.6.1.
    ancestors = {}
    for tip in arrays.tips:
        path, node = [], int(tip)
        while node != -1:
            path.append(node)
            node = int(arrays.parent[node])
        ancestors[arrays.labels[tip]] = path
    for a, b in [("Python_regius", "Python_sebae"), ("Morelia_bredli", "Loxocemus_bicolor")]:
        common = next(n for n in ancestors[a] if n in set(ancestors[b]))
        distance = depths[ancestors[a][0]] + depths[ancestors[b][0]] - 2 * depths[common]
        assert distance == pytest.approx(matrix.loc[a, b], rel=1e-9)


# --- the Newick rules (Felsenstein et al. 1986) -------------------------------
#
# Rules quoted from memory of the 1986 Newick description:
#  R1 "Unquoted labels may not contain blanks, parentheses, square brackets,
#     single_quotes, colons, semicolons, or commas."
#  R2 "Underscore characters in unquoted labels are converted to blanks."
#  R3 "Any of the above characters can be included in a label by quoting it
#     with single quotes; a single quote inside a quoted label is written as
#     two single quotes."
#  R4 "Blanks or tabs may appear anywhere except within unquoted labels or
#     branch lengths"; newlines likewise.
#  R5 "Comments are enclosed in square brackets and may appear anywhere
#     newlines are permitted."


def test_quoted_labels_keep_blanks_and_punctuation(store: Store, tmp_path: Path) -> None:
    #     +-- 'Homo sapiens'
    #     +-- 'A,B (x)'
    #  ---+-- 'it''s'
    #     +-- Pan_troglodytes
    #     +-- 'Gorilla_gorilla'
    text = "('Homo sapiens':1,'A,B (x)':2,'it''s':1,Pan_troglodytes:1,'Gorilla_gorilla':1);\n"
    path = write(tmp_path, "quoted.nwk", text)
    (arrays,) = stored_arrays(store, import_trees(store, path).tree_set_id)
    # R3: quoting keeps blanks, commas, parentheses; '' is one quote.
    assert arrays.tip_labels[:3] == ["Homo sapiens", "A,B (x)", "it's"]
    # A quoted underscore is never a blank (R2 applies to unquoted labels only).
    assert arrays.tip_labels[4] == "Gorilla_gorilla"
    assert_same_as_dendropy(path, "newick", [arrays])


def test_unquoted_underscores_policy_versus_the_original_rule(tmp_path: Path) -> None:
    path = write(tmp_path, "underscores.nwk", "(Pan_troglodytes:1,'Homo sapiens':1);")
    contents = read_tree_file(path)
    # Our documented policy (DEVELOPERS.md): an unquoted underscore stays.
    assert contents.trees[0].arrays.tip_labels == ["Pan_troglodytes", "Homo sapiens"]
    # R2, as DendroPy implements it when not told otherwise: a blank.
    original = dendropy.Tree.get(path=str(path), schema="newick")
    assert [leaf.taxon.label for leaf in original.leaf_node_iter()] == [
        "Pan troglodytes",
        "Homo sapiens",
    ]
    # And DendroPy with preserve_underscores=True follows our policy.
    kept = dendropy.Tree.get(path=str(path), schema="newick", preserve_underscores=True)
    assert [leaf.taxon.label for leaf in kept.leaf_node_iter()] == contents.trees[
        0
    ].arrays.tip_labels


def test_comments_anywhere_never_end_in_labels(store: Store, tmp_path: Path) -> None:
    #        +-- A  (1)
    #  root -+
    #        +-- B  (2)
    # R5: comments may stand wherever a newline may, and may hold ; , ( ) :
    text = "[file note; with (punctuation), too]\n(A[c1]:1[&rate=0.5],[c;3]B:[x]2)[c4]root[c5];"
    path = write(tmp_path, "comments.nwk", text)
    result = import_trees(store, path)
    (arrays,) = stored_arrays(store, result.tree_set_id)
    assert arrays.labels == ["root", "A", "B"]
    assert list(arrays.edge_length[1:]) == [1.0, 2.0]
    assert all("[" not in label and "]" not in label for label in arrays.labels)
    assert "[&rate=0.5]" in arrays.comments[1]
    # A comment written before a label belongs to the node it precedes.
    assert "[c;3]" in arrays.comments[2]
    assert_same_as_dendropy(path, "newick", [arrays])


def test_comment_before_a_label_is_kept_on_that_node() -> None:
    arrays = parse_newick("([&first]A:1,([&second]B:1,C:1)[&clade]:1)[&whole];")
    labels = arrays.labels
    assert arrays.comments[labels.index("A")] == ["[&first]"]
    assert arrays.comments[labels.index("B")] == ["[&second]"]
    assert "[&clade]" in arrays.comments[2]
    header = parse_newick("[&lnP=-10.5] [&R] (A:1,B:1);")
    assert header.rooted is True
    assert header.comments[0] == ["[&lnP=-10.5]"]


def test_blanks_and_newlines_between_tokens(store: Store, tmp_path: Path) -> None:
    # R4: blanks, tabs and newlines anywhere except inside labels and lengths.
    text = (
        "(\n  Ardelia_minor : 0.5 ,\n\t( Ardelia_major:0.25,\n Ardelia_nana :0.25 ) : 0.25\n)\n;\n"
    )
    path = write(tmp_path, "spaced.nwk", text)
    (arrays,) = stored_arrays(store, import_trees(store, path).tree_set_id)
    assert arrays.tip_labels == ["Ardelia_minor", "Ardelia_major", "Ardelia_nana"]
    assert_same_as_dendropy(path, "newick", [arrays])


def test_rooting_marks(tmp_path: Path) -> None:
    # [&R] and [&U] before a tree state its rooting (a convention of PAUP*
    # and the NEXUS description, Maddison, Swofford and Maddison 1997).
    text = "[&R] (A:1,B:1);\n[&U] (A:1,B:1,C:1);\n(A:1,B:1);\n"
    contents = read_tree_file(write(tmp_path, "rooting.nwk", text))
    assert [t.arrays.rooted for t in contents.trees] == [True, False, None]
    reference = reference_trees(tmp_path / "rooting.nwk", "newick")
    assert reference[0].is_rooted is True and reference[1].is_rooted is False


# --- many trees: burn-in and thinning ---------------------------------------


def posterior_newick(count: int) -> str:
    """``count`` invented trees of three tips, tree i with branch length i."""
    return "".join(
        f"((Ardelia_minor:{i},Ardelia_major:1):1,Ardelia_nana:2);\n" for i in range(count)
    )


def test_many_newick_trees_with_burn_in_and_thinning(store: Store, tmp_path: Path) -> None:
    path = write(tmp_path, "posterior.trees", posterior_newick(12))
    result = import_trees(store, path, burn_in=3, keep_every=4)
    # The slow obvious reference: Python's slice of the tree numbers.
    expected = list(range(12))[3::4]
    with store.reading() as session:
        trees = load_tree_set(session, result.tree_set_id)
    assert [t.index_in_file for t, _ in trees] == expected
    assert [float(a.edge_length[2]) for _, a in trees] == [float(i) for i in expected]
    assert result.counts == {
        "trees_in_file": 12,
        "trees_stored": 3,
        "burn_in_skipped": 3,
        "tips": 9,
        "distinct_tips": 3,
    }


@settings(max_examples=40, deadline=None)
@given(
    count=st.integers(min_value=1, max_value=25),
    data=st.data(),
    keep_every=st.integers(min_value=1, max_value=7),
)
def test_thinning_keeps_the_trees_a_slice_keeps(
    count: int, data: st.DataObject, keep_every: int
) -> None:
    burn_in = data.draw(st.integers(min_value=0, max_value=count - 1))
    text = posterior_newick(count)
    contents = read_tree_file(
        "posterior.trees", data=text.encode(), burn_in=burn_in, keep_every=keep_every
    )
    assert [t.index_in_file for t in contents.trees] == list(range(count))[burn_in::keep_every]
    assert contents.trees_in_file == count


# --- NEXUS (Maddison, Swofford and Maddison 1997) ----------------------------

POSTERIOR_NEXUS = """#NEXUS
[A posterior sample of an invented clade. [Comments nest.]]
Begin Taxa;
  Dimensions NTax=4;
  TaxLabels 'Ardelia minor' Ardelia_major Ardelia_nana 'Ardelia o''hara';
End;
BEGIN CHARACTERS;
  DIMENSIONS NCHAR=3;
  FORMAT DATATYPE=STANDARD;
  MATRIX
    'Ardelia minor' 010
    Ardelia_major 011
    Ardelia_nana 110
    'Ardelia o''hara' 111
  ;
END;
begin trees;
  translate
    1 'Ardelia minor',
    2 Ardelia_major,
    3 Ardelia_nana,
    4 'Ardelia o''hara';
  tree STATE_0 [&lnP=-120.5,posterior=-130.25] = [&R]
    ((1:1.0[&rate=0.9],2:1.0):0.5,(3:0.75,4:0.75):0.75);
  tree STATE_1000 [&lnP=-118.0] = [&R] ((1:1.5,3:1.5):0.5,(2:1.0,4:1.0):1.0);
  TREE * STATE_2000 = [&R] (((1:0.5,2:0.5):0.5,3:1.0):1.0,4:2.0);
  tree STATE_3000 = [&R] ((4:1.0,2:1.0):1.0,(3:1.5,1:1.5):0.5);
end;
"""


def test_nexus_posterior_with_translate_and_comments(store: Store, tmp_path: Path) -> None:
    #                +-- Ardelia minor
    #          +-----+
    #          |     +-- Ardelia_major      (tree STATE_0)
    #  root ---+
    #          |     +-- Ardelia_nana
    #          +-----+
    #                +-- Ardelia o'hara
    path = write(tmp_path, "posterior.nex", POSTERIOR_NEXUS)
    result = import_trees(store, path, burn_in=1)
    with store.reading() as session:
        trees = load_tree_set(session, result.tree_set_id)
    assert [t.name for t, _ in trees] == ["STATE_1000", "STATE_2000", "STATE_3000"]
    assert [t.index_in_file for t, _ in trees] == [1, 2, 3]
    assert all(t.rooted is True for t, _ in trees)
    # TRANSLATE maps tree tokens to taxon names; quoted names keep blanks and
    # '' is one quote (Maddison, Swofford and Maddison 1997). The reference:
    # DendroPy, reading the same file with preserve_underscores=True.
    reference = reference_trees(path, "nexus")[1:]
    for (_, arrays), theirs in zip(trees, reference, strict=True):
        assert [x[0] for x in our_tips(arrays)] == [x[0] for x in reference_tips(theirs)]
    assert trees[0][1].tip_labels == [
        "Ardelia minor",
        "Ardelia_nana",
        "Ardelia_major",
        "Ardelia o'hara",
    ]
    # The stored text is the translated tree and reads back the same.
    stored = trees[0][0].newick
    assert stored.startswith("[&lnP=-118.0] [&R] ")
    assert "'Ardelia o''hara'" in stored and "Ardelia_major" in stored


def test_nexus_header_and_branch_comments(tmp_path: Path) -> None:
    contents = read_tree_file(write(tmp_path, "posterior.nex", POSTERIOR_NEXUS))
    first = contents.trees[0].arrays
    assert first.rooted is True
    assert first.comments[0][0] == "[&lnP=-120.5,posterior=-130.25]"
    minor = first.labels.index("Ardelia minor")
    assert first.comments[minor] == ["[&rate=0.9]"]
    assert all("[" not in label for label in first.labels)
    assert_same_as_dendropy(tmp_path / "posterior.nex", "nexus", [t.arrays for t in contents.trees])


def test_nexus_taxa_by_number_without_translate(tmp_path: Path) -> None:
    # Without TRANSLATE, a tree may name taxa by their number in the TAXA
    # block (Maddison, Swofford and Maddison 1997).
    text = (
        "#NEXUS\nbegin taxa; dimensions ntax=3; taxlabels Ardelia_minor Ardelia_major 'A nana';"
        " end;\nbegin trees; tree one = ((1:1,2:1):1,3:2); end;\n"
    )
    path = write(tmp_path, "numbers.nex", text)
    contents = read_tree_file(path)
    assert contents.trees[0].arrays.tip_labels == ["Ardelia_minor", "Ardelia_major", "A nana"]
    assert_same_as_dendropy(path, "nexus", [contents.trees[0].arrays])


def test_nexus_tree_tokens_name_taxa_blank_and_case_blind(tmp_path: Path) -> None:
    # In NEXUS an unquoted underscore is a blank and names are not case
    # sensitive (Maddison, Swofford and Maddison 1997), so Homo_sapiens in a
    # tree is the taxon 'Homo sapiens' of TAXLABELS; the TAXA block's
    # spelling is the one kept.
    text = (
        "#NEXUS\nbegin taxa; dimensions ntax=3; taxlabels 'Homo sapiens' Pan_troglodytes "
        "Gorilla; end;\nbegin trees; tree one = ((Homo_sapiens:1,pan_troglodytes:1):0.5,"
        "Gorilla:1.5); end;\n"
    )
    path = write(tmp_path, "apes.nex", text)
    contents = read_tree_file(path)
    assert contents.trees[0].arrays.tip_labels == ["Homo sapiens", "Pan_troglodytes", "Gorilla"]
    # DendroPy under the standard's rules finds the same three taxa.
    reference = dendropy.TreeList.get(path=str(path), schema="nexus")
    assert len(reference.taxon_namespace) == 3


def test_nexus_tree_tip_missing_from_the_taxa_block(store: Store, tmp_path: Path) -> None:
    text = (
        "#NEXUS\nbegin taxa; dimensions ntax=3; taxlabels A B C; end;\n"
        "begin trees;\n tree one = ((A:1,B:1):0.5,D:1.5);\nend;\n"
    )
    before = row_counts(store)
    with pytest.raises(FormatError, match="tip 'D' of tree 'one' is not in the TAXA block") as info:
        import_trees(store, write(tmp_path, "abd.nex", text))
    assert (info.value.line, info.value.column) == (4, 28)
    assert row_counts(store) == before


def test_nexus_problems_in_blocks_are_all_reported(tmp_path: Path) -> None:
    text = (
        "#NEXUS\nbegin taxa; dimensions ntax=4; taxlabels A B C; end;\n"
        "begin trees;\n translate 1 A, 2 B, 2 C;\n tree one = ((1:1,2:x):0.5,9:1.5);\nend;\n"
    )
    with pytest.raises(FormatError) as info:
        read_tree_file(write(tmp_path, "three.nex", text))
    messages = [p.message for p in info.value.problems]
    assert len(messages) == 4
    assert "NTAX=4 but TAXLABELS lists 3 names" in messages[0]
    assert "TRANSLATE token '2' is given twice" in messages[1]
    assert "tip '9'" in messages[2]
    # The bad length, placed in the file as written (before renaming).
    assert "'x' is not a number" in messages[3]
    assert (info.value.problems[3].line, info.value.problems[3].column) == (5, 21)


def test_nexus_rooting_written_before_the_equals_sign(store: Store, tmp_path: Path) -> None:
    # Samplers write tree-wide comments between the name and '=' (the
    # [&lnP=...] of BEAST files); a rooting comment there is read too (our
    # reading: DendroPy ignores it, so it is no reference for this case).
    text = (
        "#NEXUS\nbegin trees;\n tree a [&R] = (A:1,B:1);\n tree b [&U] = (A:1,B:1,C:1);\n"
        " tree c [&lnP=-5] = (A:1,B:1);\nend;\n"
    )
    path = write(tmp_path, "rooting.nex", text)
    result = import_trees(store, path)
    with store.reading() as session:
        trees = load_tree_set(session, result.tree_set_id)
    # Stored and read back: the rooting survives in the stored text.
    assert [(t.rooted, a.rooted) for t, a in trees] == [(True, True), (False, False), (None, None)]
    assert trees[2][1].comments[0] == ["[&lnP=-5]"]
    assert trees[0][0].newick == "[&R] (A:1,B:1);"


LINKED_NEXUS = """[Written by a database: a comment before #NEXUS]
#NEXUS
BEGIN TAXA; TITLE Genera; DIMENSIONS NTAX=2; TAXLABELS Ardelia Brenna; END;
BEGIN TAXA; TITLE Species; DIMENSIONS NTAX=3;
  TAXLABELS Ardelia_minor Ardelia_major Brenna_alta; END;
BEGIN TREES; TITLE GenusTree; LINK TAXA = Genera;
  TREE g = [&R] (Ardelia:1,Brenna:1);
END;
BEGIN TREES; TITLE SpeciesTree; LINK TAXA = Species;
  TREE s = [&R] ((Ardelia_minor:1,Ardelia_major:1):1,Brenna_alta:2);
END;
"""


def test_nexus_tree_blocks_linked_to_titled_taxa_blocks(tmp_path: Path) -> None:
    # Several TAXA blocks told apart by TITLE, each TREES block naming its
    # own by LINK TAXA = title (the way Mesquite writes NEXUS; common
    # practice rather than the 1997 description).
    path = write(tmp_path, "linked.nex", LINKED_NEXUS)
    assert guess_tree_format(path, path.read_bytes()) == "nexus"
    contents = read_tree_file(path)
    assert [t.arrays.tip_labels for t in contents.trees] == [
        ["Ardelia", "Brenna"],
        ["Ardelia_minor", "Ardelia_major", "Brenna_alta"],
    ]
    wrong = LINKED_NEXUS.replace("LINK TAXA = Species", "LINK TAXA = Specimens")
    with pytest.raises(FormatError, match="LINK TAXA names 'Specimens'") as info:
        read_tree_file(write(tmp_path, "wrong.nex", wrong))
    assert info.value.line == 9
    assert "(titles: 'Genera', 'Species')" in info.value.message


def test_nexus_without_taxa_block_and_several_tree_blocks(tmp_path: Path) -> None:
    text = (
        "#NEXUS\nBEGIN TREES;\n TREE first = (a:1,b:1);\nEND;\n"
        "BEGIN TREES;\n TRANSLATE x Ardelia_minor, y 'Ardelia major';\n"
        " UTREE second = (x:1,y:2);\nEND;\n"
    )
    contents = read_tree_file(write(tmp_path, "blocks.nex", text))
    assert [t.arrays.tip_labels for t in contents.trees] == [
        ["a", "b"],
        ["Ardelia_minor", "Ardelia major"],
    ]
    assert contents.trees[1].arrays.rooted is False  # UTREE: unrooted


# --- labels across a round trip (the label policy) ---------------------------

LABEL = st.text(alphabet="ABCdefXyz019_ '-.", min_size=1, max_size=12).filter(
    lambda label: label == label.strip()
)


def unique_labels(labels: list[str]) -> bool:
    # DendroPy's taxa are case-blind, and NEXUS makes '_' a blank: keep the
    # drawn labels distinct under both, so only the policy is under test.
    keys = {label.casefold().replace("_", " ") for label in labels}
    return len(keys) == len(labels)


def random_tree_text(labels: list[str], seed: int) -> str:
    """Newick of a random binary tree over ``labels`` written by our writer."""
    rng = random.Random(seed)
    nodes = [f"{quote_label(label)}:{rng.randint(1, 9) / 4}" for label in labels]
    while len(nodes) > 1:
        a = nodes.pop(rng.randrange(len(nodes)))
        b = nodes.pop(rng.randrange(len(nodes)))
        nodes.append(f"({a},{b}):0.5")
    return nodes[0].rsplit(":", 1)[0] + ";"


@settings(max_examples=40, deadline=None)
@given(
    labels=st.lists(LABEL, min_size=2, max_size=10, unique=True).filter(unique_labels),
    seed=st.integers(min_value=0, max_value=10_000),
)
def test_labels_survive_newick_and_nexus_round_trips(labels: list[str], seed: int) -> None:
    # Labels with underscores, blanks, apostrophes, hyphens, dots and digits.
    newick = random_tree_text(labels, seed)
    ours = read_tree_file("t.nwk", data=newick.encode()).trees[0].arrays
    assert sorted(ours.tip_labels) == sorted(labels)
    assert parse_newick(to_newick(ours)).tip_labels == ours.tip_labels
    # DendroPy, told to keep underscores, reads our text to the same labels.
    reference = dendropy.Tree.get(data=newick, schema="newick", preserve_underscores=True)
    assert [leaf.taxon.label for leaf in reference.leaf_node_iter()] == ours.tip_labels
    # The same tree as NEXUS with TAXA and TRANSLATE (Maddison, Swofford
    # and Maddison 1997): tokens 1..n stand for the quoted names.
    numbers = {label: str(i + 1) for i, label in enumerate(labels)}
    body = relabel_tips(newick, lambda label, _: numbers[label])
    taxlabels = " ".join(quote_label(label) for label in labels)
    translate = ", ".join(f"{numbers[label]} {quote_label(label)}" for label in labels)
    nexus = (
        f"#NEXUS\nBEGIN TAXA;\n DIMENSIONS NTAX={len(labels)};\n TAXLABELS {taxlabels};\nEND;\n"
        f"BEGIN TREES;\n TRANSLATE {translate};\n TREE t = {body}\nEND;\n"
    )
    from_nexus = read_tree_file("t.nex", data=nexus.encode()).trees[0].arrays
    assert from_nexus.tip_labels == ours.tip_labels
    reference_nexus = dendropy.Tree.get(data=nexus, schema="nexus", preserve_underscores=True)
    assert [leaf.taxon.label for leaf in reference_nexus.leaf_node_iter()] == ours.tip_labels


# --- NeXML ------------------------------------------------------------------


def test_nexml_round_trip(store: Store, tmp_path: Path) -> None:
    source = "[&R] ((Ardelia_minor:1.5,'Ardelia major':1.5):0.5,Ardelia_nana:2.0);"
    written = dendropy.TreeList.get(data=source * 1, schema="newick", preserve_underscores=True)
    written.append(
        dendropy.Tree.get(
            data="[&R] ((Ardelia_minor:1,Ardelia_nana:1):1,'Ardelia major':2);",
            schema="newick",
            preserve_underscores=True,
            taxon_namespace=written.taxon_namespace,
        )
    )
    path = tmp_path / "trees.xml"
    written.write(path=str(path), schema="nexml")
    result = import_trees(store, path, keep_every=1)
    assert result.format == "nexml"
    stored = stored_arrays(store, result.tree_set_id)
    assert stored[0].tip_labels == ["Ardelia_minor", "Ardelia major", "Ardelia_nana"]
    assert_same_as_dendropy(path, "nexml", stored)


# --- formats, ledger, progress ----------------------------------------------


def test_format_is_guessed_from_content_then_name(tmp_path: Path) -> None:
    assert guess_tree_format("x.txt", b"  #nexus\nbegin trees;") == "nexus"
    assert guess_tree_format("x.txt", b"<?xml version='1.0'?><nex:nexml/>") == "nexml"
    assert guess_tree_format("x.nex", b"[&R] (A,B);") == "newick"  # content wins
    assert guess_tree_format("tree.nwk", b"A;") == "newick"
    with pytest.raises(FormatError, match="cannot tell the format") as info:
        guess_tree_format("tree.txt", b"A;")
    assert "--format" in (info.value.hint or "")


def test_one_ledger_event_and_the_source_details(store: Store) -> None:
    info = SourceInfo(label="birds", citation="Sibley and Ahlquist 1990", licence="BSD-style")
    result = import_trees(store, DATA / "bird_orders.newick", info=info, who="a-curator")
    with store.reading() as session:
        events = session.scalars(select(LedgerEvent)).all()
        source = session.get(Source, result.source_id)
        tree_set = session.get(TreeSet, result.tree_set_id)
        assert source is not None and tree_set is not None
        assert [e.action for e in events] == ["import-trees"]
        assert events[0].who == "a-curator"
        assert events[0].parameters["burn_in"] == 0
        assert events[0].parameters["trees_stored"] == 1
        assert (source.label, source.citation, source.licence) == (
            "birds",
            "Sibley and Ahlquist 1990",
            "BSD-style",
        )
        assert source.kind == "tree" and source.format == "newick"
        assert tree_set.name == "birds" and tree_set.tree_count == 1
        assert tree_set.source_id == source.id
        tips = session.scalars(select(Tip.label).order_by(Tip.position)).all()
    assert len(tips) == 23


def test_progress_is_reported_up_to_the_total(store: Store, tmp_path: Path) -> None:
    calls: list[tuple[int, int]] = []
    path = write(tmp_path, "posterior.trees", posterior_newick(20))
    import_trees(store, path, burn_in=4, keep_every=2, progress=lambda d, t: calls.append((d, t)))
    assert calls[-1] == (16, 16)  # 8 trees read, then 8 stored
    assert [d for d, _ in calls] == sorted(d for d, _ in calls)


def test_duplicate_tips_and_differing_tip_sets_are_noted_not_refused(
    store: Store, tmp_path: Path
) -> None:
    # A tip label twice in one tree is a finding for check-trees, not a crash
    # (DendroPy refuses such a tree unless told to treat labels as plain node
    # labels, as the reference below shows).
    text = "((A:1,A:1):1,B:2);\n((A:1,C:1):1,B:2);\n"
    path = write(tmp_path, "dupes.nwk", text)
    result = import_trees(store, path)
    assert result.counts["trees_stored"] == 2
    assert any("more than once" in w for w in result.warnings)
    assert any("do not all have the same tips" in w for w in result.warnings)
    from dendropy.dataio.newickreader import NewickReader

    with pytest.raises(NewickReader.NewickReaderDuplicateTaxonError):
        dendropy.TreeList.get(path=str(path), schema="newick", preserve_underscores=True)


def test_a_deep_caterpillar_tree_imports(store: Store, tmp_path: Path) -> None:
    #  (((...(t0,t1),t2)...),t2999): 3,000 levels deep, no recursion limit hit.
    tips = 3000
    text = "(" * (tips - 1) + "t0:1" + "".join(f",t{i}:1):1" for i in range(1, tips)) + ";"
    result = import_trees(store, write(tmp_path, "deep.nwk", text))
    assert result.counts["tips"] == tips
    (arrays,) = stored_arrays(store, result.tree_set_id)
    assert arrays.tip_labels[-1] == f"t{tips - 1}"
    # The deepest tips sit 2,999 branches below the root (each of length 1).
    assert arrays.depths().max() == pytest.approx(tips - 1)


# --- bad input: a clear message and an unchanged store ----------------------


BAD_INPUT = [
    # (case, file name, content, options, error type, text in the message, line)
    ("malformed", "bad.nwk", "((A:1,B:1):1,C:1;\n", {}, FormatError, "unclosed '('", 1),
    ("length not a number", "bad.nwk", "(A:1,B:x1);", {}, FormatError, "'x1' is not a number", 1),
    (
        "truncated",
        "cut.nwk",
        "(A:1,B:1);\n(A:1,(B:1,C",
        {},
        FormatError,
        "does not end with ';'",
        2,
    ),
    ("stray ;", "two.nwk", "(A,B);;", {}, FormatError, "an empty tree", 1),
    ("only a comment", "c.nwk", "[nothing here]\n", {}, FormatError, "no tree found", 1),
    (
        "translate misses a tip",
        "t.nex",
        "#NEXUS\nbegin trees;\n translate 1 Ardelia_minor, 2 Ardelia_major;\n"
        " tree one = ((1:1,2:1):1,3:2);\nend;\n",
        {},
        FormatError,
        "tip '3' of tree 'one' is not in its TRANSLATE table",
        4,
    ),
    (
        "nexus not closed",
        "open.nex",
        "#NEXUS\nbegin trees;\n tree one = (A:1,B:1);\n",
        {},
        FormatError,
        "not closed by END",
        None,
    ),
    (
        "nexus tree not ended",
        "cut.nex",
        "#NEXUS\nbegin trees;\n tree one = (A:1,B:1)",
        {},
        FormatError,
        "not ended by ';'",
        3,
    ),
    ("no #NEXUS", "x.nex", "begin trees; tree a = (A,B); end;", {}, FormatError, "#NEXUS", 1),
    (
        "nexus read as newick",
        "x.nex",
        "#NEXUS\nbegin trees; tree a = (A,B); end;",
        {"format": "newick"},
        FormatError,
        "it is a NEXUS file",
        1,
    ),
    ("broken nexml", "x.xml", "<?xml version='1.0'?>\n<nexml><otus>", {}, FormatError, "XML", 2),
    ("utf-16", "u.nwk", "(Ardelia:1,B:1);".encode("utf-16"), {}, FormatError, "UTF-16", 1),
    (
        "latin-1",
        "l.nwk",
        "(A:1,\n'Ardélia':1);".encode("latin-1"),
        {},
        FormatError,
        "looks like Latin-1",
        2,
    ),
    ("empty file", "e.nwk", b"", {}, InputError, "is empty", None),
    ("blank file", "e.nwk", "  \n\n", {}, InputError, "is empty", None),
    (
        "burn-in too big",
        "p.nwk",
        "(A,B);\n(A,B);\n",
        {"burn_in": 2},
        InputError,
        "holds 2 trees",
        None,
    ),
    ("negative burn-in", "p.nwk", "(A,B);", {"burn_in": -1}, InputError, "negative", None),
    ("keep every 0", "p.nwk", "(A,B);", {"keep_every": 0}, InputError, "less than 1", None),
    (
        "unknown format",
        "p.nwk",
        "(A,B);",
        {"format": "phylip"},
        InputError,
        "not one of the allowed values",
        None,
    ),
]


@pytest.mark.parametrize(
    ("case", "name", "content", "options", "error", "message", "line"),
    BAD_INPUT,
    ids=[case[0] for case in BAD_INPUT],
)
def test_bad_input_is_refused_and_nothing_is_stored(
    store: Store,
    tmp_path: Path,
    case: str,
    name: str,
    content: str | bytes,
    options: dict,
    error: type[Exception],
    message: str,
    line: int | None,
) -> None:
    import_trees(store, DATA / "bird_orders.newick")  # something already there
    before = row_counts(store)
    path = write(tmp_path, name, content)
    with pytest.raises(error) as info:
        import_trees(store, path, **options)
    described = info.value.describe()  # type: ignore[attr-defined]
    assert message in described
    assert info.value.file == str(path) or info.value.field  # type: ignore[attr-defined]
    if line is not None:
        assert info.value.line == line  # type: ignore[attr-defined]
        assert info.value.column is not None  # type: ignore[attr-defined]
    assert row_counts(store) == before


def test_encoding_messages_say_what_to_use(tmp_path: Path) -> None:
    latin = write(tmp_path, "l.nwk", "(A:1,\n'Ardélia':1);".encode("latin-1"))
    with pytest.raises(FormatError) as info:
        read_tree_file(latin)
    assert info.value.column == 5  # the é of 'Ardélia
    assert "0xE9" in info.value.message and "UTF-8" in info.value.message
    assert "iconv -f LATIN1 -t UTF-8" in (info.value.hint or "")
    utf16 = write(tmp_path, "u.nwk", "(A:1,B:1);".encode("utf-16-le"))  # no byte-order mark
    with pytest.raises(FormatError, match="UTF-16LE") as info16:
        read_tree_file(utf16)
    assert "iconv -f UTF-16LE -t UTF-8" in (info16.value.hint or "")
    # A UTF-8 byte-order mark is fine.
    bom = write(tmp_path, "b.nwk", b"\xef\xbb\xbf('Ard\xc3\xa9lia':1,B:1);")
    assert read_tree_file(bom).trees[0].arrays.tip_labels == ["Ardélia", "B"]


def test_every_bad_tree_is_reported_with_its_place(tmp_path: Path) -> None:
    text = "(A:1,B:1);\n(A:1,B:one);\n(A:1,B:1);\n(A:1,,B:1)x y;\n"
    with pytest.raises(FormatError) as info:
        read_tree_file(write(tmp_path, "bad.nwk", text))
    places = [(p.line, p.message) for p in info.value.problems]
    assert [line for line, _ in places] == [2, 4]
    assert "2 problems" in info.value.message
    assert info.value.problems[0].column == 8  # the 'one' of line 2


def test_the_same_file_twice_is_refused(store: Store, tmp_path: Path) -> None:
    first = write(tmp_path, "a.nwk", "(A:1,B:1);")
    import_trees(store, first)
    before = row_counts(store)
    copy = write(tmp_path, "copy-of-a.nwk", "(A:1,B:1);")  # same bytes, new name
    with pytest.raises(ConflictError, match="already in the store as source 1"):
        import_trees(store, copy)
    assert row_counts(store) == before


def test_missing_file(store: Store, tmp_path: Path) -> None:
    with pytest.raises(NotFoundError, match="no file at"):
        import_trees(store, tmp_path / "none.nwk")


# --- the splitter and the tip renamer against slow references ---------------


def split_slowly(text: str) -> list[str]:
    """Obviously correct splitter: walk character by character, tracking
    quotes and comment brackets; return each tree's text up to its ';'."""
    trees, current, quoted, depth = [], "", False, 0
    i = 0
    while i < len(text):
        char = text[i]
        current += char
        if quoted:
            if char == "'":
                if i + 1 < len(text) and text[i + 1] == "'":
                    current += "'"
                    i += 1
                else:
                    quoted = False
        elif depth:
            depth += {"[": 0, "]": -1}.get(char, 0)
        elif char == "'":
            quoted = True
        elif char == "[":
            depth = 1
        elif char == ";":
            trees.append(current)
            current = ""
        i += 1
    if current.strip():
        trees.append(current)
    return trees


SPLIT_GALLERY = {
    "one tip": "A;",
    "two tips": "(A,B);",
    "star tree": "(A:1,B:1,C:1,D:1);",
    "polytomy": "((A,B,C):1,D);",
    "quoted semicolon": "('a;b':1,C);\n(D,E);",
    "comment semicolon": "(A[;],B);(C,D);",
    "many on one line": "(A,B);(B,A);(A,(B,C));",
    "across lines": "(A,\nB);\n\n(C,\nD);\n",
    "trailing comment": "(A,B);\n[end of file]\n",
    "truncated": "(A,B);\n(C,(D",
    "empty": "",
}


@pytest.mark.parametrize("case", sorted(SPLIT_GALLERY))
def test_split_matches_the_slow_reference(case: str) -> None:
    text = SPLIT_GALLERY[case]
    pieces = split_newick(text)
    slow = [t for t in split_slowly(text) if t.strip() and not t.strip().startswith("[end")]
    assert [p.text for p in pieces] == slow
    assert all(text[p.offset : p.offset + len(p.text)] == p.text for p in pieces)


RENAME_GALLERY = {
    "one tip": "a;",
    "two tips": "(a:1,b:2);",
    "star tree": "(a,b,c,d);",
    "polytomy": "((a,b,c)x:1,d)y;",
    "quoted and comments": "('a'[&p=1]:1,[c]b:1[&q=2])'a':0;",
    "punctuation in quotes": "('(a,b':1,(c,'x,(y'):1)'(z,':1;",
    "empty tips": "(,a,(,b));",
}


@pytest.mark.parametrize("case", sorted(RENAME_GALLERY))
def test_fast_tip_renaming_matches_the_token_by_token_one(case: str) -> None:
    text = RENAME_GALLERY[case]
    names = {"a": "A 1", "b": "B'2", "c": "C_3", "(a,b": "first", "x,(y": "second"}
    seen: list[tuple[str, int]] = []
    slow_seen: list[tuple[str, int]] = []

    def fast(label: str, position: int) -> str | None:
        seen.append((label, position))
        return names.get(label)

    def slow(label: str, position: int) -> str | None:
        slow_seen.append((label, position))
        return names.get(label)

    assert relabel_tips(text, fast) == _relabel_tips_slowly(text, slow)
    assert seen == slow_seen


@pytest.mark.parametrize("case", sorted(RENAME_GALLERY))
def test_renaming_tips_matches_dendropy(case: str) -> None:
    text = RENAME_GALLERY[case]
    names = {"a": "Ardelia minor", "b": "Ardelia_major", "c": "it's", "d": "D"}
    renamed = relabel_tips(text, lambda label, _: names.get(label))
    # The reference: DendroPy reads the original, and we rename its taxa.
    reference = dendropy.Tree.get(
        data=text, schema="newick", preserve_underscores=True, suppress_internal_node_taxa=True
    )
    tip_labels = [leaf.taxon.label if leaf.taxon else "" for leaf in reference.leaf_node_iter()]
    expected = [names.get(label, label) for label in tip_labels]
    ours = parse_newick(renamed)
    assert ours.tip_labels == expected
    # Internal labels stay as they were.
    assert [ours.labels[i] for i in range(ours.node_count) if not ours.is_tip[i]] == [
        parse_newick(text).labels[i]
        for i in range(parse_newick(text).node_count)
        if not parse_newick(text).is_tip[i]
    ]


# --- the command line ---------------------------------------------------------


def run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    environment = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run(
        [sys.executable, "-m", "curation", *args],
        capture_output=True,
        text=True,
        check=False,
        env=environment,
    )


def test_import_trees_command(tmp_path: Path) -> None:
    store = tmp_path / "lab.db"
    create_store(store).close()
    path = write(tmp_path, "posterior.trees", posterior_newick(10))
    done = run_cli(
        "import-trees",
        str(path),
        "--burn-in",
        "2",
        "--keep-every",
        "4",
        "--label",
        "sample",
        "--citation",
        "invented",
        "--store",
        str(store),
    )
    assert done.returncode == 0, done.stderr
    assert "Stored tree set 1" in done.stdout
    assert "2 of 10 trees, 3 distinct tips" in done.stdout
    with open_store(store) as opened:
        assert row_counts(opened) == {
            "sources": 1,
            "tree_sets": 1,
            "trees": 2,
            "tips": 6,
            "ledger_events": 1,
        }
        with opened.reading() as session:
            source = session.scalars(select(Source)).one()
            assert (source.label, source.citation) == ("sample", "invented")
        bad = write(tmp_path, "bad.nwk", "((A,B);")
        refused = run_cli("import-trees", str(bad), "--store", str(store))
        assert refused.returncode == 2
        assert "bad.nwk, line 1, column 7" in refused.stdout
        assert "Traceback" not in refused.stdout + refused.stderr
        assert row_counts(opened)["sources"] == 1
