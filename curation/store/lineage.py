"""Lineages of tree sets: the one rule every stage follows for derived sets.

A repair (make ultrametric, prune, resolve polytomies ...) never changes a
stored tree set; it derives a new one. The sets derived, at any depth, from
one imported set form its *lineage*, and the imported set is the lineage's
*origin*. The rule, applied here and nowhere else:

- name decisions belong to the lineage: they are stored on the origin, and
  every member of the lineage reads the origin's decisions in force;
- a derived set's tips are the origin's tips or a subset of them (a repair
  keeps labels), so a decision maps a written name to a tip of the lineage;
  a member whose trees lack that tip (pruned) treats the name as matched to
  a tip it does not hold;
- writing decisions through any member writes them to the origin, matched
  against the origin's tips, so there is never a second copy.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from curation.errors import NotFoundError
from curation.store.models import Tip, Tree, TreeSet

__all__ = [
    "Lineage",
    "get_tree_set",
    "held_tips",
    "lineage_of",
    "set_tip_labels",
]


def get_tree_set(session: Session, tree_set_id: int) -> TreeSet:
    """Return the stored tree set ``tree_set_id``.

    Raises:
        NotFoundError: no such tree set; the message lists the ones there are.
    """
    tree_set = session.get(TreeSet, tree_set_id)
    if tree_set is None:
        known = session.scalars(select(TreeSet.id).order_by(TreeSet.id)).all()
        raise NotFoundError(
            f"there is no tree set {tree_set_id} in the store "
            f"(tree sets stored: {', '.join(map(str, known)) or 'none'})",
            field="tree set",
            hint="see `tipledger show-store` for the stored tree sets",
        )
    return tree_set


def set_tip_labels(session: Session, tree_set_id: int) -> list[str]:
    """Return the sorted, distinct tip labels over all trees of one set
    (without checking that the set exists)."""
    rows = session.scalars(
        select(Tip.label)
        .join(Tree, Tip.tree_id == Tree.id)
        .where(Tree.tree_set_id == tree_set_id)
        .distinct()
    ).all()
    return sorted(rows)


def held_tips(session: Session, tree_set_id: int, labels: list[str]) -> set[str]:
    """Return those of ``labels`` that are tips of some tree of one set."""
    found: set[str] = set()
    wanted = sorted({str(label) for label in labels})
    for start in range(0, len(wanted), 500):
        found.update(
            session.scalars(
                select(Tip.label)
                .join(Tree, Tip.tree_id == Tree.id)
                .where(Tree.tree_set_id == tree_set_id, Tip.label.in_(wanted[start : start + 500]))
                .distinct()
            )
        )
    return found


@dataclass(frozen=True)
class Lineage:
    """A tree set seen through the lineage rule.

    Attributes:
        tree_set_id: the set asked about.
        origin_id: the imported set it was derived from (itself when it is
            not derived); its name decisions apply to every member.
        members: the origin and every set derived from it at any depth,
            sorted by id.
        path: the sets from the origin down to ``tree_set_id``, in order.
    """

    tree_set_id: int
    origin_id: int
    members: tuple[int, ...]
    path: tuple[int, ...]

    @property
    def derived(self) -> bool:
        """Whether the set asked about was derived by a repair."""
        return self.tree_set_id != self.origin_id

    def describe(self) -> str:
        """Say in words where the set's name decisions come from."""
        if not self.derived:
            return f"tree set {self.tree_set_id}"
        return f"tree set {self.tree_set_id} (derived from tree set {self.origin_id})"

    def subjects(self) -> set[str]:
        """The ledger subjects (``tree set N``) of every member."""
        return {f"tree set {m}" for m in self.members}


def lineage_of(session: Session, tree_set_id: int) -> Lineage:
    """Return the :class:`Lineage` of tree set ``tree_set_id``.

    Raises:
        NotFoundError: no such tree set.
    """
    tree_set = get_tree_set(session, tree_set_id)
    parents: dict[int, int | None] = {
        int(i): (None if p is None else int(p))
        for i, p in session.execute(select(TreeSet.id, TreeSet.derived_from_id)).all()
    }
    path = [tree_set.id]
    while parents.get(path[-1]) is not None and parents[path[-1]] not in path:
        path.append(int(parents[path[-1]] or 0))
    path.reverse()
    origin = path[0]

    def root(node: int) -> int:
        seen = {node}
        while parents.get(node) is not None and parents[node] not in seen:
            node = int(parents[node] or 0)
            seen.add(node)
        return node

    members = tuple(sorted(m for m in parents if root(m) == origin))
    return Lineage(tree_set_id=tree_set.id, origin_id=origin, members=members, path=tuple(path))
