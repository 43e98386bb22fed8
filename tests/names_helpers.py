"""Seeding a store for the name tests: one tree set from a Newick string
and measurements under the given written names, written through the ORM
(the importers are another stage's)."""

from __future__ import annotations

from curation.store import Store, record_event
from curation.store.models import Measurement, Source, Synonym, TraitSource, TreeSet
from curation.timestamps import now
from curation.trees.arrays import parse_newick
from curation.trees.stored import add_tree


def seed_store(
    store: Store,
    newick: str,
    written: list[str],
    synonyms: list[tuple[str, str]] | None = None,
) -> int:
    """Store the tree ``newick`` as a tree set, one measurement per written
    name and the synonym pairs (synonym, accepted); return the tree set id."""
    with store.transaction() as session:
        event = record_event(session, "import-trees", summary="test data")
        tree_source = Source(
            sha256="a" * 64,
            size_bytes=1,
            kind="tree",
            format="newick",
            file_name="t.nwk",
            imported_at=now(),
            event_id=event.id,
        )
        trait_source = Source(
            sha256="b" * 64,
            size_bytes=1,
            kind="trait",
            format="csv",
            file_name="m.csv",
            imported_at=now(),
            event_id=event.id,
        )
        session.add_all([tree_source, trait_source])
        session.flush()
        tree_set = TreeSet(name="t", source_id=tree_source.id, event_id=event.id, tree_count=0)
        session.add(tree_set)
        session.flush()
        add_tree(session, tree_set, parse_newick(newick), index_in_file=0, event_id=event.id)
        traits = TraitSource(source_id=trait_source.id, name="m", layout="long")
        session.add(traits)
        session.flush()
        session.add_all(
            Measurement(
                trait_source_id=traits.id,
                row_number=i + 1,
                written_name=name,
                trait="mass",
                value_written="1",
                value_number=1.0,
                unit="g",
            )
            for i, name in enumerate(written)
        )
        if synonyms:
            syn_source = Source(
                sha256="c" * 64,
                size_bytes=1,
                kind="synonym",
                format="csv",
                file_name="s.csv",
                imported_at=now(),
                event_id=event.id,
            )
            session.add(syn_source)
            session.flush()
            session.add_all(
                Synonym(source_id=syn_source.id, synonym=s, accepted=a, row_number=i + 1)
                for i, (s, a) in enumerate(synonyms)
            )
        return tree_set.id
