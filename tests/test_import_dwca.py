"""Importing Darwin Core Archives: archives built here as the TDWG Darwin
Core text guide describes them (a zip of meta.xml and data files), read
back and checked; term names checked against the TDWG term list; and zips
that are not archives, or archives that do not link up, refused with the
store unchanged."""

from __future__ import annotations

import zipfile
from pathlib import Path

import pandas as pd
import pytest
from sqlalchemy import func, select

from curation.errors import ConflictError, FormatError
from curation.formats.darwin_core import (
    DWC,
    EXTENDED_MEASUREMENT_OR_FACT,
    MEASUREMENT_OR_FACT,
    OCCURRENCE,
    TAXON,
    read_archive,
    term_name,
)
from curation.imports.dwca import CORE_TERMS, FACT_TERMS, import_darwin_core
from curation.imports.synonyms import CHECKLIST_TERMS
from curation.store import Store
from curation.store.models import Base, Measurement, TraitSource

# Terms of the Darwin Core standard that tipledger reads, as the Darwin Core
# Quick Reference Guide (TDWG, https://dwc.tdwg.org/terms/) lists them:
# the term name, case as published, under the namespace
# http://rs.tdwg.org/dwc/terms/. Copied from the guide's term list (from
# memory of the published guide; the classes Occurrence, Taxon and
# MeasurementOrFact are its class terms).
TDWG_TERMS = {
    "Occurrence",
    "Taxon",
    "MeasurementOrFact",
    "occurrenceID",
    "catalogNumber",
    "institutionCode",
    "sex",
    "lifeStage",
    "scientificName",
    "taxonID",
    "taxonomicStatus",
    "acceptedNameUsageID",
    "acceptedNameUsage",
    "measurementType",
    "measurementValue",
    "measurementUnit",
}
TDWG_NAMESPACE = "http://rs.tdwg.org/dwc/terms/"
# The namespace of archive descriptors (Darwin Core text guide, TDWG).
TEXT_NAMESPACE = "http://rs.tdwg.org/dwc/text/"


def table_counts(store: Store) -> dict[str, int]:
    with store.reading() as session:
        return {
            name: int(session.scalar(select(func.count()).select_from(table)) or 0)
            for name, table in Base.metadata.tables.items()
        }


def stored(store: Store) -> pd.DataFrame:
    with store.reading() as session:
        rows = session.execute(select(Measurement).order_by(Measurement.id)).scalars().all()
        return pd.DataFrame(
            [{c.name: getattr(r, c.name) for c in Measurement.__table__.columns} for r in rows],
            dtype=object,
        )


def element(
    tag: str,
    row_type: str,
    location: str,
    fields: dict[int | str, str],
    *,
    id_index: int = 0,
    delimiter: str = "\\t",
    enclosed: str = "",
    header_lines: int = 1,
    encoding: str = "UTF-8",
    defaults: dict[str, str] | None = None,
) -> str:
    """One <core> or <extension> element as the text guide writes it
    (fields by index; ``defaults`` as <field term default> without index)."""
    id_tag = "id" if tag == "core" else "coreid"
    lines = [
        f'<{tag} encoding="{encoding}" fieldsTerminatedBy="{delimiter}" linesTerminatedBy="\\n" '
        f'fieldsEnclosedBy="{enclosed}" ignoreHeaderLines="{header_lines}" rowType="{row_type}">',
        f"  <files><location>{location}</location></files>",
        f'  <{id_tag} index="{id_index}"/>',
    ]
    lines += [f'  <field index="{i}" term="{DWC}{t}"/>' for i, t in fields.items()]
    lines += [f'  <field term="{DWC}{t}" default="{v}"/>' for t, v in (defaults or {}).items()]
    lines.append(f"</{tag}>")
    return "\n".join(lines)


def meta(*elements: str) -> str:
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        f'<archive xmlns="{TEXT_NAMESPACE}" metadata="eml.xml">\n'
        + "\n".join(elements)
        + "\n</archive>\n"
    )


def write_zip(path: Path, files: dict[str, str | bytes]) -> Path:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zipped:
        for name, content in files.items():
            zipped.writestr(name, content)
    return path


OCCURRENCES = (
    "occurrenceID\tcatalogNumber\tinstitutionCode\tscientificName\tsex\tlifeStage\n"
    "occ-1\tNMX 101\tNMX\tVelutomys brevis\tfemale\tadult\n"
    "occ-2\tNMX 102\tNMX\tVelutomys brevis\tmale\tjuvenile\n"
    "occ-3\tNMX 103\tNMX\tVelutomys longus Müller, 1901\t\tadult\n"
)
FACTS = (
    "coreid\tmeasurementType\tmeasurementValue\tmeasurementUnit\n"
    "occ-1\tbody mass\t12.5\tg\n"
    "occ-1\ttail length\t81\tmm\n"
    "occ-2\tbody mass\t\tg\n"
    "occ-3\tbody mass\t14.1\tg\n"
    "occ-3\ttail length\tca. 90\tmm\n"
)
OCC_FIELDS = {
    0: "occurrenceID",
    1: "catalogNumber",
    2: "institutionCode",
    3: "scientificName",
    4: "sex",
    5: "lifeStage",
}
FACT_FIELDS = {1: "measurementType", 2: "measurementValue", 3: "measurementUnit"}


def occurrence_archive(path: Path) -> Path:
    descriptor = meta(
        element("core", OCCURRENCE, "occurrence.txt", OCC_FIELDS),
        element("extension", MEASUREMENT_OR_FACT, "measurementorfact.txt", FACT_FIELDS),
    )
    return write_zip(
        path,
        {
            "meta.xml": descriptor,
            "eml.xml": "<eml/>",
            "occurrence.txt": OCCURRENCES,
            "measurementorfact.txt": FACTS,
        },
    )


def test_terms_are_those_tdwg_publishes() -> None:
    # Darwin Core Quick Reference Guide, TDWG: every term name we read is a
    # published term, spelled and cased as published.
    for name in (*CORE_TERMS, *FACT_TERMS, *CHECKLIST_TERMS):
        assert name in TDWG_TERMS, name
    for uri in (OCCURRENCE, TAXON, MEASUREMENT_OR_FACT):
        assert uri.startswith(TDWG_NAMESPACE) and term_name(uri) in TDWG_TERMS
    assert TDWG_NAMESPACE == DWC
    # The OBIS extended MeasurementOrFact row type (OBIS manual) is accepted beside it.
    assert term_name(EXTENDED_MEASUREMENT_OR_FACT) == "ExtendedMeasurementOrFact"


def test_terms_against_the_dwca_reader_list() -> None:
    # python-dwca-reader ships the Darwin Core term URIs generated from the
    # TDWG term list; the core and checklist terms we read must be in it.
    terms = pytest.importorskip(
        "dwca.darwincore.terms", reason="python-dwca-reader is not installed"
    )
    for name in (*CORE_TERMS, *CHECKLIST_TERMS):
        assert DWC + name in terms.TERMS, name


def test_occurrence_archive_round_trip(store: Store, tmp_path: Path) -> None:
    path = occurrence_archive(tmp_path / "collection-dwca.zip")
    result = import_darwin_core(store, path, priority=10)
    frame = stored(store)
    assert result.format == "dwca"
    assert result.counts["occurrences"] == 3
    assert result.counts["measurements"] == len(frame) == 5
    assert list(frame["written_name"]) == [
        "Velutomys brevis",
        "Velutomys brevis",
        "Velutomys brevis",
        "Velutomys longus Müller, 1901",
        "Velutomys longus Müller, 1901",
    ]
    assert list(frame["specimen_id"]) == ["NMX 101", "NMX 101", "NMX 102", "NMX 103", "NMX 103"]
    assert set(frame["institution"]) == {"NMX"}
    assert list(frame["trait"]) == [
        "body mass",
        "tail length",
        "body mass",
        "body mass",
        "tail length",
    ]
    assert list(frame["unit"]) == ["g", "mm", "g", "g", "mm"]
    assert list(frame["status"]) == ["ok", "ok", "missing", "ok", "unparsed"]
    assert list(frame["value_written"]) == ["12.5", "81", None, "14.1", "ca. 90"]
    assert list(frame["sex"]) == ["female", "female", "male", None, None]
    assert list(frame["life_stage"]) == ["adult", "adult", "juvenile", "adult", "adult"]
    # Row numbers are those of the MeasurementOrFact file (its header is row 1).
    assert list(frame["row_number"]) == [2, 3, 4, 5, 6]
    with store.reading() as session:
        trait_source = session.scalars(select(TraitSource)).one()
        assert trait_source.layout == "dwca" and trait_source.priority == 10
        assert trait_source.column_map["extension"] == MEASUREMENT_OR_FACT


def test_quoted_csv_archive_in_latin1_with_defaults(store: Store, tmp_path: Path) -> None:
    # fieldsTerminatedBy ",", fieldsEnclosedBy '"', no header line, an
    # ISO-8859-1 encoding, the id in the last column, and a constant field
    # given by a default (all attributes of the text guide).
    core = '"Pterella müllerae Señor, 1888","V1","o1"\n"Pterella ærøensis","V2","o2"\n'
    facts = '"o1","wing length","41,5"\n"o2","wing length","39"\n"o2","colour","brown"\n'
    descriptor = meta(
        element(
            "core",
            OCCURRENCE,
            "core.csv",
            {0: "scientificName", 1: "catalogNumber"},
            id_index=2,
            delimiter=",",
            enclosed="&quot;",
            header_lines=0,
            encoding="ISO-8859-1",
            defaults={"institutionCode": "MNQ"},
        ),
        element(
            "extension",
            MEASUREMENT_OR_FACT,
            "facts.csv",
            {1: "measurementType", 2: "measurementValue"},
            delimiter=",",
            enclosed="&quot;",
            header_lines=0,
            encoding="ISO-8859-1",
            defaults={"measurementUnit": "mm"},
        ),
    )
    path = write_zip(
        tmp_path / "latin.zip",
        {
            "meta.xml": descriptor,
            "core.csv": core.encode("latin-1"),
            "facts.csv": facts.encode("latin-1"),
        },
    )
    result = import_darwin_core(store, path, decimal=",")
    frame = stored(store)
    assert list(frame["written_name"]) == [
        "Pterella müllerae Señor, 1888",
        "Pterella ærøensis",
        "Pterella ærøensis",
    ]
    assert set(frame["institution"]) == {"MNQ"}
    assert list(frame["value_number"].fillna(-1)) == [41.5, 39.0, -1]
    assert list(frame["row_number"]) == [1, 2, 3]
    # 'colour' has no number at all: a discrete trait, kept as a state.
    assert frame.loc[2, "status"] == "ok" and frame.loc[2, "value_written"] == "brown"
    assert result.counts["traits"] == 2


def test_taxon_core_archive(store: Store, tmp_path: Path) -> None:
    # Literature values per species: a Taxon core with MeasurementOrFact.
    descriptor = meta(
        element("core", TAXON, "taxon.txt", {0: "taxonID", 1: "scientificName"}),
        element("extension", MEASUREMENT_OR_FACT, "mof.txt", FACT_FIELDS),
    )
    path = write_zip(
        tmp_path / "species.zip",
        {
            "meta.xml": descriptor,
            "taxon.txt": "taxonID\tscientificName\nt1\tVelutomys brevis\n",
            "mof.txt": "coreid\tmeasurementType\tmeasurementValue\tmeasurementUnit\n"
            "t1\tclutch size\t4\t\n",
        },
    )
    import_darwin_core(store, path)
    frame = stored(store)
    assert frame.loc[0, "written_name"] == "Velutomys brevis"
    assert frame.loc[0, "specimen_id"] is None
    assert frame.loc[0, "value_number"] == 4.0


def test_reader_agrees_with_python_dwca_reader(tmp_path: Path) -> None:
    # python-dwca-reader, an independent reader of the same text guide,
    # must see the same core rows and measurement values.
    read = pytest.importorskip("dwca.read", reason="python-dwca-reader is not installed")
    path = occurrence_archive(tmp_path / "a.zip")
    ours = read_archive(path.read_bytes(), file_name="a.zip")
    with read.DwCAReader(str(path)) as theirs:
        names = [row.data[DWC + "scientificName"] for row in theirs]
        facts = [
            (row.id, ext.data[DWC + "measurementType"], ext.data[DWC + "measurementValue"])
            for row in theirs
            for ext in row.extensions
        ]
    assert names == list(ours.core.frame["scientificName"])
    mine = ours.extensions[0].frame
    assert sorted(facts) == sorted(
        zip(mine["_id"], mine["measurementType"], mine["measurementValue"], strict=True)
    )


# --- not an archive, or one that does not link up: refused, store unchanged -----------


@pytest.mark.parametrize(
    ("files", "expected"),
    [
        (None, "not a zip file"),
        ({"occurrence.txt": OCCURRENCES}, "no meta.xml"),
        ({"meta.xml": "<archive><core"}, "not well-formed XML"),
        ({"meta.xml": meta()}, "no <core> element"),
        ({"meta.xml": "<root/>"}, "not <archive>"),
    ],
    ids=["plain text", "no meta.xml", "broken xml", "no core", "wrong root"],
)
def test_zip_that_is_not_an_archive(
    store: Store, tmp_path: Path, files: dict[str, str] | None, expected: str
) -> None:
    path = tmp_path / "data.zip"
    if files is None:
        path.write_text("taxon,mass\nA b,1\n")
    else:
        write_zip(path, files)
    before = table_counts(store)
    with pytest.raises(FormatError, match=expected):
        import_darwin_core(store, path)
    assert table_counts(store) == before


def test_wrong_core_row_type(store: Store, tmp_path: Path) -> None:
    descriptor = meta(
        element("core", DWC + "Event", "event.txt", {0: "eventID"}),
        element("extension", MEASUREMENT_OR_FACT, "mof.txt", FACT_FIELDS),
    )
    path = write_zip(
        tmp_path / "events.zip",
        {"meta.xml": descriptor, "event.txt": "eventID\ne1\n", "mof.txt": FACTS},
    )
    with pytest.raises(FormatError) as caught:
        import_darwin_core(store, path)
    assert "Event" in str(caught.value) and "Occurrence core" in str(caught.value)
    assert table_counts(store)["sources"] == 0


def test_missing_extension_and_data_file(store: Store, tmp_path: Path) -> None:
    no_extension = write_zip(
        tmp_path / "bare.zip",
        {
            "meta.xml": meta(element("core", OCCURRENCE, "occurrence.txt", OCC_FIELDS)),
            "occurrence.txt": OCCURRENCES,
        },
    )
    with pytest.raises(FormatError, match="no MeasurementOrFact extension"):
        import_darwin_core(store, no_extension)
    no_file = write_zip(
        tmp_path / "nofile.zip",
        {
            "meta.xml": meta(
                element("core", OCCURRENCE, "occurrence.txt", OCC_FIELDS),
                element("extension", MEASUREMENT_OR_FACT, "mof.txt", FACT_FIELDS),
            ),
            "occurrence.txt": OCCURRENCES,
        },
    )
    with pytest.raises(FormatError, match=r"'mof\.txt', which is not in the zip"):
        import_darwin_core(store, no_file)
    assert table_counts(store)["sources"] == 0


def test_rows_that_do_not_link_up(store: Store, tmp_path: Path) -> None:
    facts = FACTS + "occ-9\tbody mass\t3\tg\n"
    core = OCCURRENCES + "occ-1\tNMX 199\tNMX\tVelutomys brevis\t\t\n"
    path = write_zip(
        tmp_path / "broken.zip",
        {
            "meta.xml": meta(
                element("core", OCCURRENCE, "occurrence.txt", OCC_FIELDS),
                element("extension", MEASUREMENT_OR_FACT, "mof.txt", FACT_FIELDS),
            ),
            "occurrence.txt": core,
            "mof.txt": facts,
        },
    )
    before = table_counts(store)
    with pytest.raises(FormatError) as caught:
        import_darwin_core(store, path)
    messages = [p.describe() for p in caught.value.problems]
    assert any("'occ-1' is used by more than one row" in m for m in messages)
    assert any("'occ-9' matches no row of the core" in m and "row 7" in m for m in messages)
    assert table_counts(store) == before


def test_field_index_outside_the_rows(store: Store, tmp_path: Path) -> None:
    path = write_zip(
        tmp_path / "index.zip",
        {
            "meta.xml": meta(
                element("core", OCCURRENCE, "occurrence.txt", {**OCC_FIELDS, 9: "recordedBy"}),
                element("extension", MEASUREMENT_OR_FACT, "mof.txt", FACT_FIELDS),
            ),
            "occurrence.txt": OCCURRENCES,
            "mof.txt": FACTS,
        },
    )
    with pytest.raises(FormatError) as caught:
        import_darwin_core(store, path)
    assert "index 9" in caught.value.describe() and "6 columns" in caught.value.describe()
    assert table_counts(store)["sources"] == 0


def test_same_archive_twice(store: Store, tmp_path: Path) -> None:
    path = occurrence_archive(tmp_path / "a.zip")
    import_darwin_core(store, path)
    before = table_counts(store)
    with pytest.raises(ConflictError, match="already in the store"):
        import_darwin_core(store, path)
    assert table_counts(store) == before
