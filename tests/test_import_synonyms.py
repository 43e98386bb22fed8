"""Importing synonyms: tables of pairs, Darwin Core Taxon checklists as
tables and as archives, and bad input refused with the store unchanged."""

from __future__ import annotations

import zipfile
from pathlib import Path

import pandas as pd
import pytest
from sqlalchemy import func, select

from curation.errors import ConflictError, FormatError, InputError, NotFoundError
from curation.formats.darwin_core import DWC, OCCURRENCE, TAXON
from curation.imports.synonyms import SYNONYM_STATUSES, import_synonyms
from curation.store import Store
from curation.store.models import Base, LedgerEvent, Source, Synonym


def table_counts(store: Store) -> dict[str, int]:
    with store.reading() as session:
        return {
            name: int(session.scalar(select(func.count()).select_from(table)) or 0)
            for name, table in Base.metadata.tables.items()
        }


def synonyms(store: Store) -> list[tuple[str, str, str, int | None]]:
    with store.reading() as session:
        return [
            (s.synonym, s.accepted, s.status, s.row_number)
            for s in session.scalars(select(Synonym).order_by(Synonym.id))
        ]


def test_two_column_table(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "synonyms.csv"
    # Invented names; header names of our own choosing.
    path.write_text(
        "old name,current name\n"
        "Velutomys brevicauda,Velutomys brevis\n"
        "\n"
        "Mus brevis,Velutomys brevis\n"
        "Velutomys longus,Velutomys longus\n",
        encoding="utf-8",
    )
    result = import_synonyms(store, path)
    # The self-mapping row says nothing and is not stored.
    assert synonyms(store) == [
        ("Velutomys brevicauda", "Velutomys brevis", "synonym", 2),
        ("Mus brevis", "Velutomys brevis", "synonym", 4),
    ]
    assert result.counts == {"rows": 3, "synonyms": 2, "accepted_names": 1}
    with store.reading() as session:
        assert session.scalars(select(Source)).one().kind == "synonym"
        assert session.scalars(select(LedgerEvent)).one().action == "import-synonyms"


def test_named_columns_in_a_wider_table(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "wide.tsv"
    path.write_text(
        "note\tjunior\tsenior\tstatus\n"
        "from 1950 list\tPterella alba\tPterella nivea\tsubjective synonym\n"
        "\tPterella nigra\tPterella ater\t\n"
    )
    result = import_synonyms(store, path, columns={"synonym": "junior", "accepted": "senior"})
    assert synonyms(store) == [
        ("Pterella alba", "Pterella nivea", "subjective synonym", 2),
        ("Pterella nigra", "Pterella ater", "synonym", 3),
    ]
    assert result.format == "tsv"


CHECKLIST = pd.DataFrame(
    {
        "taxonID": ["1", "2", "3", "4", "5", "6"],
        "scientificName": [
            "Velutomys brevis",
            "Velutomys brevicauda",
            "Mus brevis",
            "Velutomys longus",
            "Velutomys dubius",
            "Velutomys longissimus",
        ],
        # Words of the GBIF taxonomic status vocabulary used with Darwin Core.
        "taxonomicStatus": [
            "accepted",
            "synonym",
            "heterotypicSynonym",
            "accepted",
            "doubtful",
            "homotypic synonym",
        ],
        # 3 points at 2, itself a synonym of 1: the chain ends at 1.
        "acceptedNameUsageID": ["1", "1", "2", "4", "", "4"],
    }
)


def test_checklist_table(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "checklist.csv"
    CHECKLIST.to_csv(path, index=False)
    result = import_synonyms(store, path)
    assert synonyms(store) == [
        ("Velutomys brevicauda", "Velutomys brevis", "synonym", 3),
        ("Mus brevis", "Velutomys brevis", "heterotypicSynonym", 4),
        ("Velutomys longissimus", "Velutomys longus", "homotypic synonym", 7),
    ]
    assert result.counts["not_synonyms"] == 3
    assert result.counts["synonyms"] == 3


def test_checklist_archive(store: Store, tmp_path: Path) -> None:
    # A Taxon-core archive as the TDWG Darwin Core text guide lays it out.
    text = CHECKLIST.to_csv(sep="\t", index=False)
    fields = "\n".join(
        f'  <field index="{i}" term="{DWC}{t}"/>' for i, t in enumerate(CHECKLIST.columns)
    )
    descriptor = (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<archive xmlns="http://rs.tdwg.org/dwc/text/">\n'
        f'<core encoding="UTF-8" fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" '
        f'fieldsEnclosedBy="" ignoreHeaderLines="1" rowType="{TAXON}">\n'
        "  <files><location>taxon.txt</location></files>\n"
        '  <id index="0"/>\n'
        f"{fields}\n</core>\n</archive>\n"
    )
    path = tmp_path / "checklist.zip"
    with zipfile.ZipFile(path, "w") as zipped:
        zipped.writestr("meta.xml", descriptor)
        zipped.writestr("taxon.txt", text)
    result = import_synonyms(store, path)
    assert result.format == "dwca"
    assert [s[:2] for s in synonyms(store)] == [
        ("Velutomys brevicauda", "Velutomys brevis"),
        ("Mus brevis", "Velutomys brevis"),
        ("Velutomys longissimus", "Velutomys longus"),
    ]


def test_xlsx_pairs(store: Store, tmp_path: Path) -> None:
    from openpyxl import Workbook

    book = Workbook()
    book.active.append(["synonym", "accepted"])
    book.active.append(["Pterella alba", "Pterella nivea"])
    path = tmp_path / "pairs.xlsx"
    book.save(path)
    import_synonyms(store, path)
    assert synonyms(store) == [("Pterella alba", "Pterella nivea", "synonym", 2)]


def test_synonym_status_words() -> None:
    # The synonym statuses of the GBIF taxonomic status vocabulary
    # (synonym, heterotypicSynonym, homotypicSynonym, proparteSynonym,
    # misapplied), normalised as the importer compares them.
    for word in ("synonym", "heterotypicSynonym", "homotypicSynonym", "proparteSynonym"):
        assert word.lower() in SYNONYM_STATUSES
    assert "accepted" not in SYNONYM_STATUSES and "doubtful" not in SYNONYM_STATUSES


# --- bad input: a clear message, nothing stored ---------------------------------------


def test_checklist_with_dangling_and_cyclic_pointers(store: Store, tmp_path: Path) -> None:
    broken = CHECKLIST.copy()
    broken.loc[1, "acceptedNameUsageID"] = "99"  # no such taxon
    broken.loc[3, "taxonomicStatus"] = "synonym"  # 4 -> 4: points at itself
    path = tmp_path / "broken.csv"
    broken.to_csv(path, index=False)
    before = table_counts(store)
    with pytest.raises(InputError) as caught:
        import_synonyms(store, path)
    messages = [p.describe() for p in caught.value.problems]
    assert any("'99' matches no taxonID" in m and "row 3" in m for m in messages)
    assert any("runs in a circle" in m and "row 5" in m for m in messages)
    assert table_counts(store) == before


def test_row_with_one_name(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "half.csv"
    path.write_text("synonym,accepted\nA b,C d\nE f,\n")
    with pytest.raises(InputError) as caught:
        import_synonyms(store, path)
    assert "row 3" in caught.value.describe() and "accepted name is empty" in str(caught.value)
    assert table_counts(store)["synonyms"] == 0


def test_missing_columns(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "three.csv"
    path.write_text("a,b,c\n1,2,3\n")
    with pytest.raises(InputError) as caught:
        import_synonyms(store, path)
    text = caught.value.describe()
    assert "'synonym'" in text and "'accepted'" in text and "--columns synonym=" in text
    assert table_counts(store)["sources"] == 0


def test_archive_with_an_occurrence_core(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "occ.zip"
    with zipfile.ZipFile(path, "w") as zipped:
        zipped.writestr(
            "meta.xml",
            '<archive xmlns="http://rs.tdwg.org/dwc/text/">'
            f'<core rowType="{OCCURRENCE}" ignoreHeaderLines="1">'
            "<files><location>o.csv</location></files><id index='0'/></core></archive>",
        )
        zipped.writestr("o.csv", "id\n1\n")
    with pytest.raises(FormatError, match="Taxon core"):
        import_synonyms(store, path)
    not_archive = tmp_path / "plain.zip"
    with zipfile.ZipFile(not_archive, "w") as zipped:
        zipped.writestr("synonyms.csv", "synonym,accepted\nA b,C d\n")
    with pytest.raises(FormatError, match=r"no meta\.xml"):
        import_synonyms(store, not_archive)
    assert table_counts(store)["sources"] == 0


def test_empty_file_missing_sheet_and_same_file_twice(store: Store, tmp_path: Path) -> None:
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    with pytest.raises(InputError, match="empty"):
        import_synonyms(store, empty)
    path = tmp_path / "s.csv"
    path.write_text("synonym,accepted\nA b,C d\n")
    with pytest.raises(InputError, match="--sheet"):
        import_synonyms(store, path, sheet="x")
    import_synonyms(store, path)
    before = table_counts(store)
    with pytest.raises(ConflictError):
        import_synonyms(store, path)
    assert table_counts(store) == before
    with pytest.raises(NotFoundError):
        import_synonyms(store, tmp_path / "none.csv")
