"""Importing synonyms: a two-column table (synonym, accepted name) or a
Darwin Core Taxon checklist.

A checklist is a table (or a Darwin Core Archive with a Taxon core) with
the Darwin Core terms ``taxonID``, ``scientificName``, ``taxonomicStatus``
and ``acceptedNameUsageID`` (TDWG). Each row whose status is a synonym
status is stored as a synonym of the ``scientificName`` of the row its
``acceptedNameUsageID`` points at; chains of synonyms are followed to the
accepted name. Rows with any other status (accepted, doubtful ...) are not
synonyms and are counted, not stored.
"""

from __future__ import annotations

import io
import os
import zipfile
from pathlib import Path
from typing import Literal, get_args

import pandas as pd
from sqlalchemy import insert

from curation.errors import FormatError, InputError, Problem, check_choice
from curation.formats.darwin_core import TAXON, read_archive
from curation.formats.tables import read_table
from curation.imports.common import ImportResult, SourceInfo, read_source_bytes, register_source
from curation.progress import Progress
from curation.store.engine import Store
from curation.store.models import Synonym

__all__ = [
    "CHECKLIST_TERMS",
    "PAIR_ROLES",
    "SYNONYM_LAYOUTS",
    "SYNONYM_STATUSES",
    "SynonymLayout",
    "import_synonyms",
    "synonyms_from_checklist",
    "synonyms_from_pairs",
]

#: How a synonym file is laid out: (synonym, accepted name) pairs, or a
#: Darwin Core Taxon checklist.
SynonymLayout = Literal["pairs", "checklist"]
SYNONYM_LAYOUTS: tuple[str, ...] = get_args(SynonymLayout)

#: taxonomicStatus values read as synonyms, compared lower-case without
#: blanks, hyphens or underscores. The words are those of the GBIF
#: taxonomic status vocabulary used with Darwin Core (synonym,
#: heterotypicSynonym, homotypicSynonym, proparteSynonym, misapplied) and
#: the common ones of the codes of nomenclature (objective, subjective,
#: junior synonym) - common practice.
SYNONYM_STATUSES = frozenset(
    {
        "synonym",
        "heterotypicsynonym",
        "homotypicsynonym",
        "propartesynonym",
        "objectivesynonym",
        "subjectivesynonym",
        "juniorsynonym",
        "misapplied",
    }
)

#: The Darwin Core terms a checklist is read by (TDWG).
CHECKLIST_TERMS = (
    "taxonID",
    "scientificName",
    "taxonomicStatus",
    "acceptedNameUsageID",
    "acceptedNameUsage",
)
_SYNONYM_ALIASES = ("synonym", "synonymname", "oldname", "writtenname", "name")
_ACCEPTED_ALIASES = ("accepted", "acceptedname", "validname", "currentname", "acceptedname")
#: The column roles of a table of pairs.
PAIR_ROLES = ("synonym", "accepted", "status")


def _key(name: str) -> str:
    return "".join(ch for ch in name.lower() if ch.isalnum())


def _stripped(series: pd.Series) -> pd.Series:
    text = series.astype(object).where(series.notna(), "").str.strip()
    return text.where(text != "", None)


def synonyms_from_pairs(
    frame: pd.DataFrame,
    row_numbers: pd.Series | list[int],
    *,
    columns: dict[str, str] | None = None,
    file_name: str = "",
) -> pd.DataFrame:
    """Read a table of (synonym, accepted name) pairs.

    Columns are found by role (``synonym``, ``accepted``, optional
    ``status``) from ``columns`` or their usual header names; a table of
    exactly two columns is read as synonym then accepted.

    Returns:
        A frame with columns ``synonym``, ``accepted``, ``status`` and
        ``row_number``, without rows whose two names are equal.

    Raises:
        InputError: the columns cannot be found, or rows have one name but
            not the other (every problem listed).
    """
    present = [str(c) for c in frame.columns]
    given = dict(columns or {})
    problems: list[Problem] = []
    for role, column in given.items():
        if role not in PAIR_ROLES:
            problems.append(
                Problem(f"{role!r} is not a column role", hint="roles are " + ", ".join(PAIR_ROLES))
            )
        elif column not in present:
            problems.append(
                Problem(
                    f"--columns {role}={column} names a column that is not in the file",
                    file=file_name or None,
                    field=column,
                    hint="columns present: " + ", ".join(repr(c) for c in present),
                )
            )
    roles = {r: c for r, c in given.items() if r in PAIR_ROLES and c in present}
    by_key = {_key(c): c for c in reversed(present)}
    for role, aliases in (("synonym", _SYNONYM_ALIASES), ("accepted", _ACCEPTED_ALIASES)):
        if role not in roles:
            found = next((by_key[a] for a in aliases if a in by_key), None)
            if found is not None and found not in roles.values():
                roles[role] = found
    if "status" not in roles and "status" in by_key and by_key["status"] not in roles.values():
        roles["status"] = by_key["status"]
    if len(present) == 2 and not given and ("synonym" not in roles or "accepted" not in roles):
        roles = {"synonym": present[0], "accepted": present[1]}
    missing = [r for r in ("synonym", "accepted") if r not in roles]
    if missing:
        problems.append(
            Problem(
                "no column for the role(s) " + ", ".join(repr(r) for r in missing),
                file=file_name or None,
                hint="name them with "
                + " ".join(f"--columns {r}=<column>" for r in missing)
                + "; the columns present are "
                + ", ".join(repr(c) for c in present),
            )
        )
    if problems:
        raise InputError(
            f"the columns of {file_name!r} do not fit a synonym table ({len(problems)} problem(s))",
            file=file_name or None,
            problems=problems,
        )
    rows = pd.Series(list(row_numbers), index=frame.index)
    synonym = _stripped(frame[roles["synonym"]])
    accepted = _stripped(frame[roles["accepted"]])
    status = (
        _stripped(frame[roles["status"]]).fillna("synonym")
        if "status" in roles
        else pd.Series("synonym", index=frame.index)
    )
    half = synonym.isna() != accepted.isna()
    for row, has_synonym in zip(rows[half][:50], synonym[half].notna()[:50], strict=True):
        empty = "accepted" if has_synonym else "synonym"
        problems.append(
            Problem(
                f"the row has one name but its {empty} name is empty",
                file=file_name or None,
                row=int(row),
                field=roles[empty],
                hint="give both names on every row, or remove the row",
            )
        )
    if problems:
        raise InputError(
            f"{file_name!r} has {len(problems)} row(s) with only one name",
            file=file_name or None,
            problems=problems,
        )
    keep = synonym.notna() & accepted.notna() & (synonym != accepted)
    result = pd.DataFrame(
        {
            "synonym": synonym[keep],
            "accepted": accepted[keep],
            "status": status[keep],
            "row_number": rows[keep],
        }
    ).reset_index(drop=True)
    result.attrs["roles"] = roles
    return result


def synonyms_from_checklist(
    frame: pd.DataFrame, row_numbers: pd.Series | list[int], *, file_name: str = ""
) -> pd.DataFrame:
    """Read a Darwin Core Taxon checklist (columns named by the terms
    taxonID, scientificName, taxonomicStatus, acceptedNameUsageID; an
    ``acceptedNameUsage`` name is used where the id is empty).

    Returns:
        The synonyms: ``synonym``, ``accepted``, ``status`` (as written)
        and ``row_number``; ``attrs["not_synonyms"]`` counts the other rows.

    Raises:
        InputError: a term is missing, taxonIDs repeat, or a synonym row
            points at no row, at a row without a name, or into a cycle.
    """
    rows = pd.Series(list(row_numbers), index=frame.index)
    columns = {c.lower(): c for c in frame.columns}
    required = ["taxonID", "scientificName", "taxonomicStatus"]
    missing = [t for t in required if t.lower() not in columns]
    if "acceptednameusageid" not in columns and "acceptednameusage" not in columns:
        missing.append("acceptedNameUsageID")
    if missing:
        raise InputError(
            f"{file_name!r} lacks the Darwin Core term(s) " + ", ".join(missing),
            file=file_name or None,
            hint="a checklist needs taxonID, scientificName, taxonomicStatus and "
            "acceptedNameUsageID columns; for a two-column table use --layout pairs",
        )
    taxon_id = _stripped(frame[columns["taxonid"]])
    name = _stripped(frame[columns["scientificname"]])
    status = _stripped(frame[columns["taxonomicstatus"]])
    pointer = (
        _stripped(frame[columns["acceptednameusageid"]])
        if "acceptednameusageid" in columns
        else pd.Series(None, index=frame.index, dtype=object)
    )
    accepted_name = (
        _stripped(frame[columns["acceptednameusage"]])
        if "acceptednameusage" in columns
        else pd.Series(None, index=frame.index, dtype=object)
    )
    problems: list[Problem] = []
    repeated = taxon_id[taxon_id.notna() & taxon_id.duplicated(keep=False)]
    for value in sorted(repeated.unique())[:20]:
        problems.append(
            Problem(
                f"the taxonID {value!r} is used by more than one row",
                file=file_name or None,
                row=int(rows[taxon_id == value].iloc[1]),
                field="taxonID",
            )
        )
    is_synonym = status.fillna("").map(_key).isin(SYNONYM_STATUSES)
    names_by_id = pd.Series(name.to_numpy(), index=taxon_id.to_numpy())
    names_by_id = names_by_id[names_by_id.index.notna() & ~names_by_id.index.duplicated()]
    pointer_by_id = pd.Series(pointer.where(is_synonym).to_numpy(), index=taxon_id.to_numpy())
    pointer_by_id = pointer_by_id[pointer_by_id.index.notna() & ~pointer_by_id.index.duplicated()]
    # Follow chains (a synonym of a synonym) to the accepted row, one step
    # per round for all rows at once; real chains are a few steps long, so a
    # chain still moving after 100 steps (or pointing at itself) is a cycle.
    target = pointer.where(is_synonym)
    for _ in range(min(len(frame), 100) + 1):
        onward = target.map(pointer_by_id)
        step = onward.notna() & (onward != target)
        if not step.any():
            break
        target = target.where(~step, onward)
    cyclic = is_synonym & target.map(pointer_by_id).notna()
    resolved = target.map(names_by_id)
    resolved = resolved.where(resolved.notna(), accepted_name)
    dangling = is_synonym & resolved.isna() & ~cyclic
    for row, value in zip(rows[cyclic][:20], pointer[cyclic][:20], strict=True):
        problems.append(
            Problem(
                f"the synonym chain from acceptedNameUsageID {value!r} never reaches an "
                "accepted name (it runs in a circle)",
                file=file_name or None,
                row=int(row),
                field="acceptedNameUsageID",
            )
        )
    for row, value in zip(rows[dangling][:50], pointer[dangling][:50], strict=True):
        problems.append(
            Problem(
                "the row is a synonym but gives no acceptedNameUsageID"
                if value is None
                else f"acceptedNameUsageID {value!r} matches no taxonID with a scientificName",
                file=file_name or None,
                row=int(row),
                field="acceptedNameUsageID",
            )
        )
    no_name = is_synonym & name.isna()
    for row in rows[no_name][:20]:
        problems.append(
            Problem(
                "the synonym row has no scientificName",
                file=file_name or None,
                row=int(row),
                field="scientificName",
            )
        )
    if problems:
        raise InputError(
            f"the checklist {file_name!r} has {len(problems)} problem(s)",
            file=file_name or None,
            problems=problems,
            hint="every synonym row needs an acceptedNameUsageID that is the taxonID of a row "
            "with a scientificName",
        )
    keep = is_synonym & (name != resolved)
    result = pd.DataFrame(
        {
            "synonym": name[keep],
            "accepted": resolved[keep],
            "status": status[keep],
            "row_number": rows[keep],
        }
    ).reset_index(drop=True)
    result.attrs["not_synonyms"] = int((~is_synonym).sum())
    return result


def import_synonyms(
    store: Store,
    path: str | os.PathLike[str],
    *,
    layout: SynonymLayout | None = None,
    columns: dict[str, str] | None = None,
    delimiter: str | None = None,
    encoding: str | None = None,
    sheet: str | None = None,
    info: SourceInfo | None = None,
    who: str | None = None,
    progress: Progress | None = None,
) -> ImportResult:
    """Import synonyms from a table of pairs or a Darwin Core Taxon checklist.

    Args:
        layout: ``pairs`` (synonym and accepted-name columns) or
            ``checklist`` (Darwin Core Taxon terms); by default a Darwin Core
            Archive or a table with the checklist terms is a checklist and
            anything else pairs.
        columns: for pairs, role -> column (roles ``synonym``, ``accepted``,
            ``status``).
        delimiter, encoding, sheet: how to read a table (see
            :func:`curation.formats.tables.read_table`).
        info: label, citation, licence and notes of the source.
        who: the user recorded in the ledger.
        progress: called as ``progress(done, total)`` while storing.

    Returns:
        The :class:`ImportResult` with counts ``rows``, ``synonyms``,
        ``accepted_names`` and (checklists) ``not_synonyms``.

    Raises:
        NotFoundError: no such file or worksheet.
        InputError: ``layout`` is not one of its values (checked before the
            file is read); columns or terms are missing, or rows are incomplete
            (every problem listed).
        FormatError: the file cannot be read (encoding, zip, meta.xml).
        ConflictError: the same file (sha256) is already stored.
    """
    if layout is not None:
        check_choice(
            layout,
            SYNONYM_LAYOUTS,
            "layout",
            hint="give layout one of them, or None to tell from the file",
        )
    data = read_source_bytes(path)
    with store.transaction() as session:
        # Registering first refuses a file already stored before any parsing;
        # the format and options are completed once the file is read.
        source, event = register_source(
            session,
            path,
            data,
            kind="synonym",
            format="table",
            info=info,
            options={"layout": layout, "columns": dict(columns or {})},
            who=who,
        )
        name = Path(path).name
        if is_archive(data):
            archive = read_archive(data, file_name=name)
            if archive.core.row_type != TAXON:
                raise FormatError(
                    f"the core of {name!r} has rowType {archive.core.row_type!r}; synonyms are "
                    f"read from a Taxon core ({TAXON})",
                    file=name,
                    field="rowType",
                    hint="give a checklist archive (Taxon core), or a table of synonym pairs",
                )
            frame = archive.core.frame.copy()
            if "taxonID" not in frame.columns and "_id" in frame.columns:
                frame["taxonID"] = frame["_id"]
            numbers = list(archive.core.row_numbers)
            file_format, used_layout = "dwca", "checklist"
            read_options: dict[str, object] = {}
        else:
            table = read_table(
                data, file_name=name, delimiter=delimiter, encoding=encoding, sheet=sheet
            )
            frame, numbers = table.frame, list(table.row_numbers)
            file_format = table.format
            lowered = {c.lower() for c in table.columns}
            looks_checklist = all(t.lower() in lowered for t in CHECKLIST_TERMS[:3])
            used_layout = layout or ("checklist" if looks_checklist else "pairs")
            read_options = {
                "encoding": table.encoding,
                "delimiter": table.delimiter,
                "sheet": table.sheet,
            }
        if used_layout == "checklist":
            synonyms = synonyms_from_checklist(frame, numbers, file_name=name)
        else:
            synonyms = synonyms_from_pairs(frame, numbers, columns=columns, file_name=name)
        options = {"layout": used_layout, "columns": dict(columns or {}), **read_options}
        source.format = file_format
        source.options = options
        event.parameters = {**event.parameters, "format": file_format, **options}
        records = synonyms.assign(source_id=source.id).astype(object)
        records = records.where(records.notna(), None).to_dict("records")
        chunk = 20_000
        for start in range(0, len(records), chunk):
            session.execute(insert(Synonym.__table__), records[start : start + chunk])
            if progress is not None:
                progress(min(start + chunk, len(records)), len(records))
        counts = {
            "rows": len(frame),
            "synonyms": len(synonyms),
            "accepted_names": int(synonyms["accepted"].nunique()),
        }
        if "not_synonyms" in synonyms.attrs:
            counts["not_synonyms"] = synonyms.attrs["not_synonyms"]
        event.summary = (
            f"imported {counts['synonyms']} synonyms of {counts['accepted_names']} accepted "
            f"names from {source.file_name}"
        )
        event.parameters = {**event.parameters, "counts": counts}
    warnings: list[str] = []
    conflicting = synonyms.groupby("synonym")["accepted"].nunique()
    conflicting = conflicting[conflicting > 1]
    if len(conflicting):
        warnings.append(
            f"{len(conflicting)} names are synonyms of more than one accepted name, e.g. "
            f"{conflicting.index[0]!r}"
        )
    return ImportResult(
        source_id=source.id,
        event_id=event.id,
        sha256=source.sha256,
        file_name=source.file_name,
        kind="synonym",
        format=file_format,
        counts=counts,
        warnings=warnings,
    )


def is_archive(data: bytes) -> bool:
    """Return whether ``data`` is a zip that is not an ``.xlsx`` workbook (so
    it should be a Darwin Core Archive)."""
    if not data.startswith((b"PK\x03\x04", b"PK\x05\x06")):
        return False
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as zipped:
            return "xl/workbook.xml" not in zipped.namelist()
    except zipfile.BadZipFile:
        return True  # read_archive says what is wrong with it
