"""Tip labels survive the bundle's Newick and NEXUS writers exactly, as
DendroPy reads them back (the label policy of the design notes)."""

from __future__ import annotations

from pathlib import Path

import dendropy
import pytest

from curation.bundle.files import write_newick, write_nexus
from curation.trees.arrays import parse_newick, quote_label

# Labels that trip Newick/NEXUS round trips: underscores (turned into
# blanks by readers unless quoted or preserved), an apostrophe (doubled
# inside quotes), a blank, a hyphen (NEXUS punctuation), digits only
# (could be mistaken for a TRANSLATE token).
AWKWARD = ["Genus_species", "O'Brien's_moth", "two words", "hy-phen", "123", "Gen_sp_V1234"]


def _star(rooted: bool | None) -> str:
    # A star tree of the awkward labels, tip i on a branch of length i + 1.5:
    #
    #   root --+-- Genus_species   1.5
    #          +-- O'Brien's_moth  2.5
    #          ...
    #          +-- Gen_sp_V1234    6.5
    prefix = {True: "[&R] ", False: "[&U] ", None: ""}[rooted]
    body = ",".join(f"{quote_label(label)}:{i + 1.5}" for i, label in enumerate(AWKWARD))
    return f"{prefix}({body});"


def _read(path: Path, schema: str) -> dendropy.Tree:
    # DendroPy is the outside reader; preserve_underscores keeps labels as written.
    return dendropy.Tree.get(path=path, schema=schema, preserve_underscores=True)


@pytest.mark.parametrize("rooted", [True, False, None])
@pytest.mark.parametrize("schema", ["newick", "nexus"])
def test_awkward_labels_and_lengths_round_trip(
    tmp_path: Path, schema: str, rooted: bool | None
) -> None:
    tree = parse_newick(_star(rooted))
    path = tmp_path / f"tree.{schema}"
    if schema == "newick":
        write_newick([tree], path)
    else:
        write_nexus([("one", tree)], sorted(AWKWARD), path)
    read = _read(path, schema)
    lengths = {leaf.taxon.label: leaf.edge.length for leaf in read.leaf_node_iter()}
    assert lengths == {label: i + 1.5 for i, label in enumerate(AWKWARD)}
    text = path.read_text(encoding="utf-8")
    # One rooting comment per tree, never doubled, and none when unknown.
    assert "[&R] [&R]" not in text and "[&U] [&U]" not in text
    expected = {True: "[&R]", False: "[&U]", None: None}[rooted]
    if expected is None:
        assert "[&R]" not in text and "[&U]" not in text
    else:
        assert text.count(expected) == 1
