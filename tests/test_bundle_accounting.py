"""The bundle's accounting of every tip and every written name, computed
vectorised, against a slow, obviously correct reference that walks the
tips and names one by one, over a gallery of stores."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest

from curation.bundle.inputs import BundleInputs, BundleOptions, gather_bundle_inputs
from curation.bundle.tables import _accounting, _short_note, build_tables
from curation.imports.traits import import_traits
from curation.imports.trees import import_trees
from curation.names import decide_name
from curation.store import Store
from curation.trees.repairs import prune_trees
from tests.bundle_helpers import TREE, build_store, first_tree


def reference_accounting(inputs: BundleInputs, all_tips: list[str], keep: set[str]) -> pd.DataFrame:
    """One row per tip, then one per written name, decided by plain ifs."""
    with_data = set(inputs.species["tip_label"])
    names = inputs.names
    reached = set(names.loc[names["status"] == "accepted", "tip_label"])
    rows = []
    for tip in all_tips:
        if tip in with_data:
            status, reason = "matched", "has trait data"
        elif tip in reached:
            status, reason = "missing data", "names match but no usable value"
        else:
            status, reason = "missing data", "no written name matches this tip"
        if tip not in keep and tip not in with_data:
            reason += "; pruned"
        rows.append(("tip", tip, tip, status, tip in keep, reason))
    for row in names.itertuples(index=False):
        accepted = row.status == "accepted"
        if accepted and row.tip_label in all_tips:
            status = "matched" if row.tip_label in with_data else "missing data"
            reason = f"{row.stage} match, decided by {row.decided_by}"
        elif accepted:
            status, reason = "excluded", f"its tip {row.tip_label!r} is not on the bundle's tree"
        elif row.status == "rejected":
            note = _short_note(row.note) or "no note"
            status, reason = "rejected", f"rejected by {row.decided_by}: {note}"
        else:
            note = _short_note(row.note) or "no note"
            status = "pending review"
            reason = f"waiting for review ({row.stage} stage, score {row.score:.0f}): {note}"
        tip = row.tip_label if accepted else None
        rows.append(
            ("written name", row.written_name, tip, status, accepted and tip in keep, reason)
        )
    for name in inputs.undecided:
        reason = (
            "no name decision yet (imported after the last reconciliation); "
            "made with stale input allowed"
        )
        rows.append(("written name", name, None, "not yet reconciled", False, reason))
    flagged_at = inputs.staleness.last_flag_event
    for m in inputs.unflagged.itertuples(index=False):
        if flagged_at is None:
            why = "the measurements were never flagged"
        elif m.trait in inputs.staleness.redefined_since_flagging:
            why = (
                f"the definition of {m.trait} changed after the latest flagging "
                f"(event {flagged_at})"
            )
        else:
            why = f"imported after the latest flagging (event {flagged_at})"
        rows.append(
            (
                "measurement",
                f"measurement {m.measurement_id}",
                m.tip_label,
                "not yet flagged",
                bool(m.used) and m.tip_label in keep,
                why + "; made with stale input allowed",
            )
        )
    frame = pd.DataFrame(
        rows, columns=["kind", "name", "tip_label", "status", "in_bundle", "reason"]
    )
    return frame.sort_values(["kind", "name"], kind="stable").reset_index(drop=True)


def _as_matched(store: Store, tree_set_id: int, folder: Path) -> BundleOptions:
    return BundleOptions(tree_id=first_tree(store, tree_set_id), diagnostics=False)


def _keep_missing(store: Store, tree_set_id: int, folder: Path) -> BundleOptions:
    return BundleOptions(tree_id=first_tree(store, tree_set_id), missing="keep", diagnostics=False)


def _rejected_and_pending(store: Store, tree_set_id: int, folder: Path) -> BundleOptions:
    decide_name(store, tree_set_id, "Alpha_two", None, "rejected", note="voucher lost")
    decide_name(store, tree_set_id, "Beta four", None, "pending")
    return _as_matched(store, tree_set_id, folder)


def _tip_pruned_from_the_tree(store: Store, tree_set_id: int, folder: Path) -> BundleOptions:
    # The derived tree lacks Beta_four, so the name accepted for it is not
    # on the bundle's tree:
    #
    #   ((Alpha_one, Alpha_two), Beta_three, Gamma_five)
    derived = prune_trees(
        store, tree_set_id, tips=["Alpha_one", "Alpha_two", "Beta_three", "Gamma_five"]
    )
    return BundleOptions(tree_set_id=derived.derived_tree_set_id, diagnostics=False)


def _imported_after_reconciling(store: Store, tree_set_id: int, folder: Path) -> BundleOptions:
    # A second table after the names were reconciled and the values flagged:
    # one new written name, and measurements no flagging covers.
    late = folder / "late.csv"
    late.write_text("taxon,mass_g\nAlpha one,11.0\nNovel taxon,3.0\n", encoding="utf-8")
    import_traits(store, late)
    return BundleOptions(
        tree_id=first_tree(store, tree_set_id), diagnostics=False, allow_stale=True
    )


GALLERY: dict[str, Callable[[Store, int, Path], BundleOptions]] = {
    "as matched": _as_matched,
    "a name and measurements imported after reconciling": _imported_after_reconciling,
    "tips without data kept": _keep_missing,
    "a rejected and a pending name": _rejected_and_pending,
    "an accepted tip pruned from the tree": _tip_pruned_from_the_tree,
}


def _plain(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame.astype(object)
    return frame.where(frame.notna(), None)


@pytest.mark.parametrize("case", sorted(GALLERY))
def test_accounting_agrees_with_the_reference(store: Store, tmp_path: Path, case: str) -> None:
    tree_set_id = build_store(store, tmp_path)
    options = GALLERY[case](store, tree_set_id, tmp_path)
    inputs = gather_bundle_inputs(store, options)
    tables = build_tables(inputs)
    all_tips = sorted({label for _, _, arrays in inputs.trees for label in arrays.tip_labels})
    expected = reference_accounting(inputs, all_tips, set(tables.keep))
    got = _accounting(inputs, all_tips, set(tables.keep))
    # Missing tips are None in one and NaN in the other: both write empty.
    pd.testing.assert_frame_equal(_plain(got), _plain(expected))
    assert set(got.loc[got["kind"] == "tip", "name"]) == set(all_tips)
    assert set(got.loc[got["kind"] == "written name", "name"]) == set(
        inputs.names["written_name"]
    ) | set(inputs.undecided)


def test_empty_tables_accounting_agrees_with_the_reference(store: Store, tmp_path: Path) -> None:
    # Only the tree is stored: no trait table and no name decision, so every
    # tip is kept as missing data (the empty edge of the gallery).
    tree_file = tmp_path / "tree.nwk"
    tree_file.write_text(TREE, encoding="utf-8")
    tree_set_id = import_trees(store, tree_file).tree_set_id
    options = BundleOptions(
        tree_id=first_tree(store, tree_set_id), missing="keep", diagnostics=False
    )
    inputs = gather_bundle_inputs(store, options)
    assert inputs.names.empty and inputs.species.empty
    tables = build_tables(inputs)
    all_tips = sorted(inputs.trees[0][2].tip_labels)
    expected = reference_accounting(inputs, all_tips, set(tables.keep))
    got = _accounting(inputs, all_tips, set(tables.keep))
    pd.testing.assert_frame_equal(_plain(got), _plain(expected))
    assert set(got["reason"]) == {"no written name matches this tip"}
