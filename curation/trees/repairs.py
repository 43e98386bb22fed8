"""Opt-in repairs of stored trees, never silent.

Each repair reads a tree set (or one tree), applies a pure edit from
:mod:`curation.trees.edits` to every tree, and stores the results as a new,
derived tree set (``TreeSet.derived_from_id`` and ``repair`` set, each tree
pointing at the tree it came from) with one ledger event holding the
repair's parameters, in one transaction. The original trees stay as they
were. Every edit is computed before anything is written, so a repair that
fails for one tree stores nothing.

A repair that changes no tree (its Newick text is the same before and
after for every tree) derives no tree set and records no ledger event:
there is nothing to trace, and a derived copy would be listed as a repair
applied when none was. Its :class:`RepairReport` says so and why.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from pydantic import BaseModel

from curation.errors import InputError, TipledgerError, check_choice
from curation.store.engine import Store
from curation.store.ledger import record_event
from curation.store.models import TreeSet
from curation.trees.arrays import TreeArrays, to_newick
from curation.trees.checks import DEFAULT_NEAR_ZERO, DEFAULT_TOLERANCE, validate_near_zero
from curation.trees.edits import (
    DEFAULT_TIP_LENGTH_SHARE,
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
    "RepairReport",
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


class RepairReport(BaseModel):
    """What a repair did.

    Attributes:
        repair: the repair's name, as the ledger action and the derived
            set's ``repair`` record it (``lengthen-zero-tips`` ...).
        tree_set_id: the tree set read (for one tree, the set it is in).
        tree_id: the one tree repaired, or ``None`` for a whole set.
        trees: how many trees were read.
        trees_changed: how many of them the repair changed.
        derived_tree_set_id: the derived tree set holding the repaired
            trees; ``None`` when no tree changed (nothing was stored).
        event_id: the ledger event of the repair; ``None`` when no tree
            changed (nothing was recorded).
        details: counts particular to the repair (e.g. tips lengthened),
            also kept in the ledger event's parameters.
        message: what happened, in one sentence for a person; when nothing
            changed, why.
    """

    repair: str
    tree_set_id: int
    tree_id: int | None = None
    trees: int
    trees_changed: int
    derived_tree_set_id: int | None = None
    event_id: int | None = None
    details: dict[str, Any] = {}
    message: str

    @property
    def changed(self) -> bool:
        """Whether any tree changed (and so a derived set was stored)."""
        return self.derived_tree_set_id is not None


def _repair(
    store: Store,
    tree_set_id: int | None,
    tree_id: int | None,
    action: str,
    edit: Callable[[TreeArrays], TreeArrays],
    parameters: dict[str, Any],
    who: str | None,
    *,
    unchanged: str,
    details: Callable[[list[tuple[TreeArrays, TreeArrays]]], dict[str, Any]] | None = None,
) -> RepairReport:
    """Apply ``edit`` to every tree read and store the results as a derived
    set under one ledger event; when no tree changes, store nothing and
    say ``unchanged`` (why nothing changed) in the report."""
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
        changes = [
            to_newick(new) != to_newick(old) for (_t, old), new in zip(loaded, edited, strict=True)
        ]
        changed = sum(changes)
        pairs = [(old, new) for (_t, old), new in zip(loaded, edited, strict=True)]
        extra = details(pairs) if details is not None else {}
        words = action.replace("-", " ")
        if not changed:
            return RepairReport(
                repair=action,
                tree_set_id=original.id,
                tree_id=tree_id,
                trees=len(loaded),
                trees_changed=0,
                details=extra,
                message=f"Nothing changed: {words} changes none of the {len(loaded)} trees of "
                f"{subject} ({unchanged}); no tree set was derived and nothing was recorded.",
            )
        event = record_event(
            session,
            action,
            subject=subject,
            summary=f"{words}: {changed} of {len(loaded)} trees changed",
            parameters={**parameters, "tree_set_id": original.id, "tree_id": tree_id},
            who=who,
        )
        derived = TreeSet(
            name=f"{original.name} ({words})",
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
            **extra,
        }
        session.flush()
        return RepairReport(
            repair=action,
            tree_set_id=original.id,
            tree_id=tree_id,
            trees=len(loaded),
            trees_changed=changed,
            derived_tree_set_id=derived.id,
            event_id=event.id,
            details=extra,
            message=f"Derived tree set {derived.id} ({len(loaded)} trees) from tree set "
            f"{original.id} by {action}: {changed} of {len(loaded)} trees changed; "
            f"ledger event {event.id}.",
        )


def prune_trees(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tips: list[str],
    tree_id: int | None = None,
    who: str | None = None,
) -> RepairReport:
    """Prune every tree of a set (or one tree) to ``tips``, suppressing the
    nodes left with one child and summing their branch lengths
    (:func:`~curation.trees.edits.pruned`).

    Returns:
        :class:`RepairReport` (ledger action ``prune-trees``).

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
        unchanged="every tree has exactly these tips already",
    )


def resolve_polytomies(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tree_id: int | None = None,
    branch_length: float = 0.0,
    seed: int | None = None,
    who: str | None = None,
) -> RepairReport:
    """Resolve every polytomy into dichotomies joined by branches of
    ``branch_length``: deterministically, or at random with ``seed``
    (:func:`~curation.trees.edits.polytomies_resolved`). With a seed, tree k
    of the set uses seed + k, so trees are resolved independently but
    reproducibly.

    Returns:
        :class:`RepairReport` (ledger action ``resolve-polytomies``).

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
        unchanged="no tree has a node with more than two children",
    )


def collapse_short_branches(
    store: Store,
    tree_set_id: int | None = None,
    *,
    threshold: float,
    tree_id: int | None = None,
    who: str | None = None,
) -> RepairReport:
    """Collapse every internal branch shorter than ``threshold``, adding its
    length to the branches below so root-to-tip distances are kept
    (:func:`~curation.trees.edits.short_branches_collapsed`).

    Returns:
        :class:`RepairReport` (ledger action ``collapse-short-branches``).

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
        unchanged=f"no internal branch is shorter than {threshold:g}",
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
) -> RepairReport:
    """Make every tree ultrametric, by lengthening terminal branches
    (``extend``) or by a least-squares fit of node ages (``least_squares``),
    refusing a substantive deviation unless ``force``
    (:func:`~curation.trees.edits.made_ultrametric`).

    Returns:
        :class:`RepairReport` (ledger action ``make-ultrametric``).

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
        unchanged="every tree is ultrametric already",
    )


def lengthen_zero_tips(
    store: Store,
    tree_set_id: int | None = None,
    *,
    length: float | None = None,
    near_zero: float = DEFAULT_NEAR_ZERO,
    keep_depths: bool = True,
    tree_id: int | None = None,
    who: str | None = None,
) -> RepairReport:
    """Make every zero or near-zero terminal branch ``length`` long (by
    default :data:`~curation.trees.edits.DEFAULT_TIP_LENGTH_SHARE` of each
    tree's height), keeping root-to-tip distances where the parent's branch
    can give the length (``keep_depths``); near zero means shorter than
    ``near_zero`` times the tree's height, the rule of the zero-length
    check (:func:`~curation.trees.edits.zero_tips_lengthened`).

    Returns:
        :class:`RepairReport` (ledger action ``lengthen-zero-tips``); its
        details count the tips lengthened and those that end further from
        the root (their parent could not give the length).

    Raises:
        NotFoundError: no such tree set or tree.
        InputError: a length that is not > 0 or is itself near zero for a
            tree, or a near-zero share outside [0, 1) (nothing stored).
    """
    _require(
        length is None or _finite(length, 0.0, strict=True),
        f"the new length {length!r} is not a number > 0",
        "length",
        "give --length as a branch length in the tree's units, e.g. 0.01",
    )
    validate_near_zero(near_zero)

    def counts(pairs: list[tuple[TreeArrays, TreeArrays]]) -> dict[str, Any]:
        lengthened = deeper = 0
        for old, new in pairs:
            tips = old.tips
            lengthened += int(np.count_nonzero(new.edge_length[tips] != old.edge_length[tips]))
            before, after = old.depths()[tips], new.depths()[tips]
            scale = max(float(before.max()), 1.0) if len(tips) else 1.0
            deeper += int(np.count_nonzero(np.abs(after - before) > 1e-12 * scale))
        return {"tips_lengthened": lengthened, "tips_moved_from_root": deeper}

    return _repair(
        store,
        tree_set_id,
        tree_id,
        "lengthen-zero-tips",
        lambda arrays: zero_tips_lengthened(
            arrays, length, near_zero=near_zero, keep_depths=keep_depths
        ),
        {
            "length": length,
            "length_share": DEFAULT_TIP_LENGTH_SHARE if length is None else None,
            "near_zero": near_zero,
            "keep_depths": keep_depths,
        },
        who,
        unchanged="no terminal branch is zero"
        + (f" or shorter than {near_zero:g} of its tree's height" if near_zero else ""),
        details=counts,
    )


def sort_children(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tree_id: int | None = None,
    who: str | None = None,
) -> RepairReport:
    """Put the children of every node in a fixed order, fewer tips first
    (:func:`~curation.trees.edits.children_sorted`), for stable output.

    Returns:
        :class:`RepairReport` (ledger action ``sort-children``).

    Raises:
        NotFoundError: no such tree set or tree.
    """
    return _repair(
        store,
        tree_set_id,
        tree_id,
        "sort-children",
        children_sorted,
        {"order": "size"},
        who,
        unchanged="the children of every node are in order already",
    )
