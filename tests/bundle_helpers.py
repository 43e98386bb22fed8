"""A small store for bundle tests, built through the real importers and
name matching from files written in the test's folder."""

from __future__ import annotations

from pathlib import Path

from curation.imports.traits import import_traits
from curation.imports.trees import import_trees
from curation.names.decisions import reconcile_names
from curation.store import Store
from curation.traits import flag_measurements

# The test tree, branch lengths on the edges (Gamma_five has no trait data):
#
#                  +--0.3-- Alpha_one
#          +--0.2--+
#          |       +--0.3-- Alpha_two
#          |
#   root --+       +--0.4-- Beta_three
#          +--0.1--+
#          |       +--0.4-- Beta_four
#          |
#          +--0.5---------- Gamma_five
TREE = "((Alpha_one:0.3,Alpha_two:0.3):0.2,(Beta_three:0.4,Beta_four:0.4):0.1,Gamma_five:0.5);\n"
POSTERIOR = (
    "#NEXUS\nBEGIN TREES;\n"
    "  TRANSLATE 1 Alpha_one, 2 Alpha_two, 3 Beta_three, 4 Beta_four, 5 Gamma_five;\n"
    "  TREE one = [&R] ((1:0.3,2:0.3):0.2,(3:0.4,4:0.4):0.1,5:0.5);\n"
    "  TREE two = [&R] ((1:0.25,3:0.25):0.25,(2:0.45,4:0.45):0.05,5:0.5);\n"
    "END;\n"
)
TRAITS = """taxon,mass_g,wing_mm
Alpha one,10.0,50
Alpha one,12.0,52
Alpha_two,20.5,61
Beta three Quillmark 1911,31.0,70
Beta three,33.0,
Beta four,40.0,80
Nonesuch taxon,1.0,2
"""


def build_store(
    store: Store, tmp_path: Path, *, tree_text: str = TREE, name: str = "tree.nwk"
) -> int:
    tree_file = tmp_path / name
    tree_file.write_text(tree_text, encoding="utf-8")
    traits = tmp_path / "traits.csv"
    traits.write_text(TRAITS, encoding="utf-8")
    tree_set_id = import_trees(store, tree_file).tree_set_id
    import_traits(store, traits)
    reconcile_names(store, tree_set_id)
    # A bundle rests on flagged measurements (it refuses stale flags).
    flag_measurements(store, tree_set_id)
    return tree_set_id


def first_tree(store: Store, tree_set_id: int) -> int:
    from curation.trees.stored import load_tree_set

    with store.reading() as session:
        return load_tree_set(session, tree_set_id)[0][0].id
