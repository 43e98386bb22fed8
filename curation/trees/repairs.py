"""Opt-in repairs of stored trees, never silent.

Each repair reads a tree set (or one tree), applies a pure edit from
:mod:`curation.trees.edits` to every tree, and stores the results as a new,
derived tree set (``TreeSet.derived_from_id`` and ``repair`` set, each tree
pointing at the tree it came from) with one ledger event holding the
repair's parameters, in one transaction. The original trees stay as they
were. Every edit is computed before anything is written, so a repair that
fails for one tree stores nothing.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from curation.errors import InputError, TipledgerError, check_choice
from curation.store.engine import Store
from curation.store.ledger import record_event
from curation.store.models import TreeSet
from curation.trees.arrays import TreeArrays, to_newick
from curation.trees.checks import DEFAULT_TOLERANCE
from curation.trees.edits import (
    ULTRAMETRIC_METHODS,
    UltrametricMethod,
    children_sorted,
    made_ultrametric,
    polytomies_resolved,
    pruned,
    short_branches_collapsed,
    zero_tips_lengthened,
)
from curation.trees.stored import add_tree, get_tree_set, load_tree, load_tree_set

__all__ = [
    "collapse_short_branches",
    "lengthen_zero_tips",
    "make_ultrametric",
    "prune_trees",
    "resolve_polytomies",
    "sort_children",
]


def _require(ok: bool, message: str, field: str, hint: str) -> None:
    # Options are checked before the store is touched, even for an empty set.
    if not ok:
        raise InputError(message, field=field, hint=hint)


def _finite(value: float, minimum: float, strict: bool = False) -> bool:
    return bool(value == value and abs(value) != float("inf")) and (
        value > minimum if strict else value >= minimum
    )


def _repair(
    store: Store,
    tree_set_id: int | None,
    tree_id: int | None,
    action: str,
    edit: Callable[[TreeArrays], TreeArrays],
    parameters: dict[str, Any],
    who: str | None,
) -> TreeSet:
    if (tree_set_id is None) == (tree_id is None):
        raise InputError(
            "give either a tree set or one tree to repair",
            field="tree set",
            hint="name a tree set (e.g. `sort-children 1`) or one tree with --tree",
        )
    with store.transaction() as session:
        if tree_id is not None:
            tree, arrays = load_tree(session, tree_id)
            loaded = [(tree, arrays)]
            original = get_tree_set(session, tree.tree_set_id)
            subject = f"tree {tree_id}"
        else:
            assert tree_set_id is not None
            original = get_tree_set(session, tree_set_id)
            loaded = load_tree_set(session, tree_set_id)
            subject = f"tree set {tree_set_id}"
        edited: list[TreeArrays] = []
        for tree, arrays in loaded:
            try:
                edited.append(edit(arrays))
            except TipledgerError as exc:
                exc.message = f"tree {tree.id} (number {tree.index_in_file} in its file): " + (
                    exc.message
                )
                raise
        changed = sum(
            to_newick(new) != to_newick(old) for (_t, old), new in zip(loaded, edited, strict=True)
        )
        event = record_event(
            session,
            action,
            subject=subject,
            summary=f"{action.replace('-', ' ')}: {changed} of {len(loaded)} trees changed",
            parameters={**parameters, "tree_set_id": original.id, "tree_id": tree_id},
            who=who,
        )
        derived = TreeSet(
            name=f"{original.name} ({action.replace('-', ' ')})",
            source_id=original.source_id,
            derived_from_id=original.id,
            repair=action,
            event_id=event.id,
            tree_count=0,
        )
        session.add(derived)
        session.flush()
        for (tree, _old), new in zip(loaded, edited, strict=True):
            add_tree(
                session,
                derived,
                new,
                index_in_file=tree.index_in_file,
                name=tree.name,
                source_id=tree.source_id,
                derived_from_id=tree.id,
                repair=action,
                event_id=event.id,
            )
        # The new set's id is known only now; a new dict so the JSON
        # column sees the change.
        event.parameters = {
            **event.parameters,
            "derived_tree_set_id": derived.id,
            "trees": len(loaded),
            "trees_changed": changed,
        }
        session.flush()
        return derived


def prune_trees(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tips: list[str],
    tree_id: int | None = None,
    who: str | None = None,
) -> TreeSet:
    """Prune every tree of a set (or one tree) to ``tips``, suppressing the
    nodes left with one child and summing their branch lengths
    (:func:`~curation.trees.edits.pruned`).

    Returns:
        The derived tree set (ledger action ``prune_trees``).

    Raises:
        NotFoundError: no such tree set or tree.
        InputError: no tips, or tips missing from a tree (nothing stored).
    """
    keep = sorted(set(tips))
    _require(bool(keep), "no tips to keep were given", "tips", "name the tips to keep")
    return _repair(
        store,
        tree_set_id,
        tree_id,
        "prune-trees",
        lambda arrays: pruned(arrays, keep),
        {"tips": keep},
        who,
    )


def resolve_polytomies(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tree_id: int | None = None,
    branch_length: float = 0.0,
    seed: int | None = None,
    who: str | None = None,
) -> TreeSet:
    """Resolve every polytomy into dichotomies joined by branches of
    ``branch_length``: deterministically, or at random with ``seed``
    (:func:`~curation.trees.edits.polytomies_resolved`). With a seed, tree k
    of the set uses seed + k, so trees are resolved independently but
    reproducibly.

    Returns:
        The derived tree set (ledger action ``resolve_polytomies``).

    Raises:
        NotFoundError: no such tree set or tree.
        InputError: a negative branch length (nothing stored).
    """
    _require(
        _finite(branch_length, 0.0),
        f"the branch length {branch_length!r} for new branches is not a number >= 0",
        "branch length",
        "give --branch-length 0 or a small positive length",
    )
    counter = iter(range(1 << 30))

    def edit(arrays: TreeArrays) -> TreeArrays:
        k = next(counter)
        return polytomies_resolved(
            arrays, branch_length=branch_length, seed=None if seed is None else seed + k
        )

    return _repair(
        store,
        tree_set_id,
        tree_id,
        "resolve-polytomies",
        edit,
        {"branch_length": branch_length, "seed": seed, "random": seed is not None},
        who,
    )


def collapse_short_branches(
    store: Store,
    tree_set_id: int | None = None,
    *,
    threshold: float,
    tree_id: int | None = None,
    who: str | None = None,
) -> TreeSet:
    """Collapse every internal branch shorter than ``threshold``, adding its
    length to the branches below so root-to-tip distances are kept
    (:func:`~curation.trees.edits.short_branches_collapsed`).

    Returns:
        The derived tree set (ledger action ``collapse_short_branches``).

    Raises:
        NotFoundError: no such tree set or tree.
        InputError: a negative threshold (nothing stored).
    """
    _require(
        _finite(threshold, 0.0),
        f"the threshold {threshold!r} is not a number >= 0",
        "threshold",
        "give --threshold as a branch length, e.g. 1e-6",
    )
    return _repair(
        store,
        tree_set_id,
        tree_id,
        "collapse-short-branches",
        lambda arrays: short_branches_collapsed(arrays, threshold),
        {"threshold": threshold},
        who,
    )


def make_ultrametric(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tree_id: int | None = None,
    method: UltrametricMethod = "extend",
    tolerance: float = DEFAULT_TOLERANCE,
    force: bool = False,
    who: str | None = None,
) -> TreeSet:
    """Make every tree ultrametric, by lengthening terminal branches
    (``extend``) or by a least-squares fit of node ages (``least_squares``),
    refusing a substantive deviation unless ``force``
    (:func:`~curation.trees.edits.made_ultrametric`).

    Returns:
        The derived tree set (ledger action ``make_ultrametric``).

    Raises:
        NotFoundError: no such tree set or tree.
        ConflictError: a substantive deviation without ``force`` (nothing stored).
        InputError: an unknown method or a negative tolerance.
    """
    check_choice(method, ULTRAMETRIC_METHODS, "method")
    _require(
        _finite(tolerance, 0.0),
        f"the tolerance {tolerance!r} is not a number >= 0",
        "tolerance",
        f"give --tolerance as a relative spread, e.g. {DEFAULT_TOLERANCE}",
    )
    return _repair(
        store,
        tree_set_id,
        tree_id,
        "make-ultrametric",
        lambda arrays: made_ultrametric(arrays, method=method, tolerance=tolerance, force=force),
        {"method": method, "tolerance": tolerance, "force": force},
        who,
    )


def lengthen_zero_tips(
    store: Store,
    tree_set_id: int | None = None,
    *,
    length: float,
    tree_id: int | None = None,
    who: str | None = None,
) -> TreeSet:
    """Give every zero-length terminal branch the length ``length``
    (:func:`~curation.trees.edits.zero_tips_lengthened`).

    Returns:
        The derived tree set (ledger action ``lengthen_zero_tips``).

    Raises:
        NotFoundError: no such tree set or tree.
        InputError: a length that is not > 0 (nothing stored).
    """
    _require(
        _finite(length, 0.0, strict=True),
        f"the new length {length!r} is not a number > 0",
        "length",
        "give --length as a small positive branch length, e.g. 1e-6",
    )
    return _repair(
        store,
        tree_set_id,
        tree_id,
        "lengthen-zero-tips",
        lambda arrays: zero_tips_lengthened(arrays, length),
        {"length": length},
        who,
    )


def sort_children(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tree_id: int | None = None,
    who: str | None = None,
) -> TreeSet:
    """Put the children of every node in a fixed order, fewer tips first
    (:func:`~curation.trees.edits.children_sorted`), for stable output.

    Returns:
        The derived tree set (ledger action ``sort_children``).

    Raises:
        NotFoundError: no such tree set or tree.
    """
    return _repair(
        store, tree_set_id, tree_id, "sort-children", children_sorted, {"order": "size"}, who
    )
