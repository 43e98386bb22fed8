"""Trees in the store: reading them back as array views and adding new
ones (imported or derived by a repair) with their tips."""

from __future__ import annotations

from sqlalchemy import insert, select
from sqlalchemy.orm import Session

from curation.errors import NotFoundError
from curation.store.lineage import get_tree_set, set_tip_labels
from curation.store.models import Tip, Tree, TreeSet
from curation.trees.arrays import TreeArrays, parse_newick, to_newick

__all__ = ["add_tree", "get_tree_set", "load_tree", "load_tree_set", "tip_labels_of_set"]


def load_tree(session: Session, tree_id: int) -> tuple[Tree, TreeArrays]:
    """Return the stored tree row ``tree_id`` and its array view.

    Raises:
        NotFoundError: no such tree; the message says how many there are.
    """
    tree = session.get(Tree, tree_id)
    if tree is None:
        count = len(session.scalars(select(Tree.id)).all())
        raise NotFoundError(
            f"there is no tree {tree_id} in the store ({count} trees stored)",
            field="tree",
            hint="see `tipledger show-store` for the stored trees",
        )
    return tree, parse_newick(tree.newick, source=f"tree {tree_id}")


def load_tree_set(session: Session, tree_set_id: int) -> list[tuple[Tree, TreeArrays]]:
    """Return every tree of a tree set, in file order, with its array view.

    Raises:
        NotFoundError: no such tree set.
    """
    get_tree_set(session, tree_set_id)
    trees = session.scalars(
        select(Tree).where(Tree.tree_set_id == tree_set_id).order_by(Tree.index_in_file)
    ).all()
    return [(t, parse_newick(t.newick, source=f"tree {t.id}")) for t in trees]


def tip_labels_of_set(session: Session, tree_set_id: int) -> list[str]:
    """Return the sorted, distinct tip labels over all trees of a set.

    Raises:
        NotFoundError: no such tree set.
    """
    get_tree_set(session, tree_set_id)
    return set_tip_labels(session, tree_set_id)


def add_tree(
    session: Session,
    tree_set: TreeSet,
    arrays: TreeArrays,
    *,
    index_in_file: int,
    name: str = "",
    source_id: int | None = None,
    newick: str | None = None,
    derived_from_id: int | None = None,
    repair: str | None = None,
    event_id: int | None = None,
) -> Tree:
    """Store one tree of ``tree_set`` with its tips; return the flushed row.

    ``newick`` is the text to keep (written from ``arrays`` when omitted, so
    a derived tree is stored in the same label policy as it is read).
    """
    text = newick if newick is not None else to_newick(arrays)
    tips = arrays.tip_labels
    tree = Tree(
        tree_set_id=tree_set.id,
        source_id=source_id,
        index_in_file=index_in_file,
        name=name,
        rooted=arrays.rooted,
        tip_count=len(tips),
        newick=text,
        derived_from_id=derived_from_id,
        repair=repair,
        event_id=event_id,
    )
    session.add(tree)
    session.flush()
    if tips:
        # One executemany INSERT of the tips at the Core level rather than an
        # ORM object each (2-4 times faster): a posterior sample has hundreds
        # of thousands of them.
        session.connection().execute(
            insert(Tip),
            [{"tree_id": tree.id, "position": i, "label": label} for i, label in enumerate(tips)],
        )
    tree_set.tree_count = (tree_set.tree_count or 0) + 1
    session.flush()
    return tree
