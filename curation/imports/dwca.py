"""Importing Darwin Core Archives of measurements: an Occurrence core (or a
Taxon core, for values per species) with the MeasurementOrFact extension.

Terms are mapped by their Darwin Core URIs (TDWG): the core gives
``scientificName``, ``catalogNumber`` (or, without it, ``occurrenceID``),
``institutionCode``, ``sex`` and ``lifeStage``; each MeasurementOrFact row
gives ``measurementType`` (the trait), ``measurementValue`` and
``measurementUnit``, and is tied to its core row by its ``coreid``.
"""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
from sqlalchemy import select

from curation.errors import FormatError, Problem
from curation.formats.darwin_core import (
    EXTENDED_MEASUREMENT_OR_FACT,
    MEASUREMENT_OR_FACT,
    OCCURRENCE,
    TAXON,
    Archive,
    read_archive,
)
from curation.imports.common import ImportResult, SourceInfo, read_source_bytes, register_source
from curation.imports.measurements import (
    MEASUREMENT_COLUMNS,
    DecimalMark,
    check_decimal,
    mark_discrete,
    parse_values,
    store_measurements,
)
from curation.progress import Progress
from curation.store.engine import Store
from curation.store.models import TraitDefinition, TraitSource

__all__ = ["CORE_TERMS", "FACT_TERMS", "import_darwin_core", "measurements_from_archive"]

#: The Darwin Core terms read from the core rows (by short name; each is
#: ``http://rs.tdwg.org/dwc/terms/`` + name).
CORE_TERMS = (
    "scientificName",
    "catalogNumber",
    "occurrenceID",
    "institutionCode",
    "sex",
    "lifeStage",
)
#: The Darwin Core terms read from the MeasurementOrFact rows.
FACT_TERMS = ("measurementType", "measurementValue", "measurementUnit")

_CORE_TYPES = (OCCURRENCE, TAXON)
_FACT_TYPES = (MEASUREMENT_OR_FACT, EXTENDED_MEASUREMENT_OR_FACT)


def _column(frame: pd.DataFrame, name: str) -> pd.Series:
    if name not in frame.columns:
        return pd.Series([None] * len(frame), index=frame.index, dtype=object)
    text = frame[name].astype(object).str.strip()
    return text.where(text != "", None)


def measurements_from_archive(
    archive: Archive, *, decimal: str = "."
) -> tuple[pd.DataFrame, dict[str, object]]:
    """Turn an archive's core and MeasurementOrFact rows into measurements.

    Returns:
        The measurements (columns of :data:`MEASUREMENT_COLUMNS`, row
        numbers those of the MeasurementOrFact file) and a description of
        the mapping, for the trait source's column map.

    Raises:
        FormatError: the core is not Occurrence or Taxon, there is no
            MeasurementOrFact extension, a required term is not mapped, core
            ids repeat, or measurement rows point at core ids that do not
            exist (every problem listed).
    """
    check_decimal(decimal)
    name = archive.file_name
    core = archive.core
    if core.row_type not in _CORE_TYPES:
        raise FormatError(
            f"the core of {name!r} has rowType {core.row_type!r}; measurements are read "
            f"from an Occurrence core ({OCCURRENCE}) or a Taxon core ({TAXON})",
            file=name,
            field="rowType",
            hint="export the archive with an Occurrence core and the MeasurementOrFact extension",
        )
    facts = archive.extension(*_FACT_TYPES)
    if facts is None:
        found = ", ".join(repr(e.row_type) for e in archive.extensions) or "none"
        raise FormatError(
            f"{name!r} has no MeasurementOrFact extension ({MEASUREMENT_OR_FACT}); "
            f"its extensions: {found}",
            file=name,
            hint="add the MeasurementOrFact extension holding the trait values",
        )
    problems: list[Problem] = []
    where_core = f"{name}!{core.location}"
    where_facts = f"{name}!{facts.location}"
    if "scientificName" not in core.frame.columns:
        problems.append(
            Problem(
                "the core maps no scientificName term (http://rs.tdwg.org/dwc/terms/scientificName)",
                file=where_core,
                hint="add <field index=.. term='http://rs.tdwg.org/dwc/terms/scientificName'/>",
            )
        )
    for term in ("measurementType", "measurementValue"):
        if term not in facts.frame.columns:
            problems.append(
                Problem(
                    f"the MeasurementOrFact extension maps no {term} term "
                    f"(http://rs.tdwg.org/dwc/terms/{term})",
                    file=where_facts,
                )
            )
    for what, part in (("core <id>", core), ("extension <coreid>", facts)):
        if "_id" not in part.frame.columns:
            problems.append(
                Problem(
                    f"meta.xml gives the {what} no index, so rows cannot be linked",
                    file=f"{name}!meta.xml",
                    hint="add <id index='0'/> to the core and <coreid index='0'/> to the extension",
                )
            )
    if problems:
        raise FormatError(
            f"{name!r} cannot be read as measurements ({len(problems)} problem(s))",
            file=name,
            problems=problems,
        )
    ids = core.frame["_id"]
    repeated = ids[ids.duplicated(keep=False)]
    for value in sorted(repeated.unique())[:20]:
        rows = core.row_numbers[(ids == value).to_numpy()]
        problems.append(
            Problem(
                f"the core id {value!r} is used by more than one row (rows "
                + ", ".join(str(int(r)) for r in rows[:5])
                + ")",
                file=where_core,
                hint="core ids must be unique",
            )
        )
    specimen_term = "catalogNumber" if "catalogNumber" in core.frame.columns else "occurrenceID"
    core_part = pd.DataFrame(
        {
            "_id": ids,
            "written_name": _column(core.frame, "scientificName"),
            "specimen_id": _column(core.frame, specimen_term),
            "institution": _column(core.frame, "institutionCode"),
            "sex": _column(core.frame, "sex"),
            "life_stage": _column(core.frame, "lifeStage"),
        }
    ).drop_duplicates("_id")
    fact_part = pd.DataFrame(
        {
            "_id": facts.frame["_id"],
            "row_number": facts.row_numbers,
            "trait": _column(facts.frame, "measurementType"),
            "value": _column(facts.frame, "measurementValue"),
            "unit": _column(facts.frame, "measurementUnit"),
        }
    )
    joined = fact_part.merge(core_part, on="_id", how="left", indicator=True, sort=False)
    orphans = joined[joined["_merge"] == "left_only"]
    for row, value in zip(orphans["row_number"][:20], orphans["_id"][:20], strict=True):
        problems.append(
            Problem(
                f"the coreid {value!r} matches no row of the core",
                file=where_facts,
                row=int(row),
                hint="each MeasurementOrFact row must point at a core id",
            )
        )
    if len(orphans) > 20:
        problems.append(Problem(f"... and {len(orphans) - 20} more rows with unknown coreid"))
    no_type = joined["trait"].isna() & joined["value"].notna()
    for row in joined.loc[no_type, "row_number"][:20]:
        problems.append(
            Problem(
                "the row has a measurementValue but no measurementType",
                file=where_facts,
                row=int(row),
                field="measurementType",
            )
        )
    if problems:
        raise FormatError(
            f"the rows of {name!r} do not link up ({len(problems)} problem(s))",
            file=name,
            problems=problems,
        )
    joined = joined[joined["trait"].notna()].reset_index(drop=True)
    parsed = parse_values(joined["value"], decimal=decimal)
    measurements = joined.drop(columns=["_merge", "_id", "value"]).join(parsed)
    no_name = measurements["written_name"].isna()
    measurements["written_name"] = measurements["written_name"].fillna("")
    usable = no_name & (measurements["status"] != "missing")
    measurements.loc[usable, "status"] = "unparsed"
    measurements.loc[usable, "reason"] = "the core row names no scientificName"
    described: dict[str, object] = {
        "core": core.row_type,
        "core_file": core.location,
        "extension": facts.row_type,
        "extension_file": facts.location,
        "specimen_term": specimen_term,
        "terms": {**core.terms, **facts.terms},
        "core_rows": len(core.frame),
    }
    return measurements[MEASUREMENT_COLUMNS], described


def import_darwin_core(
    store: Store,
    path: str | os.PathLike[str],
    *,
    decimal: DecimalMark = ".",
    priority: int = 100,
    info: SourceInfo | None = None,
    who: str | None = None,
    progress: Progress | None = None,
) -> ImportResult:
    """Import a Darwin Core Archive's measurements as one trait source.

    Args:
        decimal: the decimal mark of ``measurementValue`` (``.`` or ``,``).
        priority: the source's rank for source policies (lower = preferred).
        info: label, citation, licence and notes of the source.
        who: the user recorded in the ledger.
        progress: called as ``progress(done, total)`` while storing.

    Returns:
        The :class:`ImportResult` with counts ``occurrences``,
        ``measurements``, ``ok``, ``unparsed``, ``missing``, ``traits`` and
        ``taxa``.

    Raises:
        InputError: ``decimal`` is neither ``.`` nor ``,`` (checked before
            the file is read).
        NotFoundError: no such file.
        FormatError: the file is not a Darwin Core Archive (no zip, no
            meta.xml, no core), its core is not Occurrence/Taxon, it has no
            MeasurementOrFact extension, or its rows do not link up.
        ConflictError: the same file (sha256) is already stored.
    """
    check_decimal(decimal)
    data = read_source_bytes(path)
    with store.transaction() as session:
        # Registering first refuses a file already stored before any parsing.
        source, event = register_source(
            session,
            path,
            data,
            kind="trait",
            format="dwca",
            info=info,
            options={"decimal": decimal, "priority": priority},
            who=who,
        )
        archive = read_archive(data, file_name=Path(path).name)
        measurements, described = measurements_from_archive(archive, decimal=decimal)
        kinds = {
            n: k for n, k in session.execute(select(TraitDefinition.name, TraitDefinition.kind))
        }
        source.options = {**source.options, "core": archive.core.row_type}
        event.parameters = {**event.parameters, "core": archive.core.row_type}
        trait_source = TraitSource(
            source_id=source.id,
            name=source.label,
            layout="dwca",
            priority=priority,
            column_map=described,
        )
        session.add(trait_source)
        session.flush()
        discrete = mark_discrete(measurements, kinds)
        counts = store_measurements(session, trait_source.id, measurements, progress=progress)
        counts["occurrences"] = len(archive.core.frame)
        counts["traits"] = int(measurements["trait"].nunique())
        named = measurements["written_name"]
        counts["taxa"] = int(named[named != ""].nunique())
        event.summary = (
            f"imported {counts['measurements']} measurements of {counts['traits']} traits "
            f"on {counts['occurrences']} core rows from {source.file_name}"
        )
        event.parameters = {
            **event.parameters,
            "trait_source_id": trait_source.id,
            "counts": counts,
            "discrete": discrete,
        }
    warnings: list[str] = []
    if discrete:
        warnings.append(
            "traits read as discrete states (no value is a number): "
            + ", ".join(repr(t) for t in discrete)
        )
    unparsed = int((measurements["status"] == "unparsed").sum())
    if unparsed:
        warnings.append(f"{unparsed} values kept as written but not read as numbers")
    return ImportResult(
        source_id=source.id,
        event_id=event.id,
        sha256=source.sha256,
        file_name=source.file_name,
        kind="trait",
        format="dwca",
        counts=counts,
        warnings=warnings,
    )
