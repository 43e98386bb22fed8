"""Checking a bundle after the fact: a folder or its zip, as an analyst (or
a reviewer) received it.

Every check runs and every problem is listed; nothing stops at the first.
"""

from __future__ import annotations

import csv
import os
import tempfile
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
from pydantic import BaseModel

from curation import jsontext
from curation.bundle.files import CHECKSUM_FILE, read_checksums, sha256_file
from curation.errors import NotFoundError, TipledgerError

__all__ = ["VerifyReport", "verify_bundle"]

REQUIRED = ["datapackage.json", "provenance.json", "species_traits.csv", CHECKSUM_FILE]


class VerifyReport(BaseModel):
    """What :func:`verify_bundle` found: ``ok`` when ``problems`` is empty."""

    path: str
    files_checked: int
    tips: int
    trait_rows: int
    problems: list[str]

    @property
    def ok(self) -> bool:
        return not self.problems


def _check_checksums(folder: Path, problems: list[str]) -> int:
    listing = folder / CHECKSUM_FILE
    if not listing.is_file():
        problems.append(f"{CHECKSUM_FILE} is missing: the files cannot be checked")
        return 0
    entries, bad = read_checksums(listing.read_text(encoding="utf-8", errors="replace"))
    problems += [f"{CHECKSUM_FILE} line {n} is not 'sha256  path'" for n in bad]
    for name, expected in sorted(entries.items()):
        path = folder / name
        if not path.is_file():
            problems.append(f"{name} is listed in {CHECKSUM_FILE} but missing")
        elif sha256_file(path) != expected:
            problems.append(f"{name} has changed: its sha256 differs from {CHECKSUM_FILE}")
    present = {
        p.relative_to(folder).as_posix()
        for p in folder.rglob("*")
        if p.is_file() and p.name != CHECKSUM_FILE
    }
    problems += [
        f"{name} is in the bundle but not in {CHECKSUM_FILE}"
        for name in sorted(present - set(entries))
    ]
    return len(entries)


def _tree_tips(folder: Path, problems: list[str]) -> list[list[str]] | None:
    from curation.imports.trees import read_tree_file

    files = [name for name in ("tree.nwk", "trees.nex") if (folder / name).is_file()]
    if len(files) != 1:
        problems.append(
            "the bundle holds no tree file (tree.nwk or trees.nex)"
            if not files
            else "the bundle holds both tree.nwk and trees.nex"
        )
        return None
    try:
        contents = read_tree_file(folder / files[0])
    except TipledgerError as exc:
        problems.append(f"{files[0]} cannot be read: {exc.message}")
        return None
    return [t.arrays.tip_labels for t in contents.trees]


def _check_agreement(folder: Path, problems: list[str]) -> tuple[int, int]:
    trees = _tree_tips(folder, problems)
    try:
        table = read_text_table(folder / "species_traits.csv")
    except (OSError, UnicodeDecodeError, pa.ArrowInvalid) as exc:
        problems.append(f"species_traits.csv cannot be read: {exc}")
        return 0, 0
    if "tip_label" not in table.column_names:
        problems.append("species_traits.csv has no tip_label column")
        return 0, table.num_rows
    keys = pd.Series(table["tip_label"].to_numpy(zero_copy_only=False), dtype=object)
    repeated = sorted(set(keys[keys.duplicated()]))
    if repeated:
        problems.append(f"species_traits.csv repeats tip(s): {', '.join(repeated[:10])}")
    if trees is None:
        return 0, len(keys)
    in_table = set(keys)
    for number, tips in enumerate(trees, start=1):
        on_tree = set(tips)
        if len(tips) != len(on_tree):
            problems.append(f"tree {number} repeats tip labels")
        for label in sorted(on_tree - in_table)[:20]:
            problems.append(f"tree {number} has tip {label!r} with no row in species_traits.csv")
        for label in sorted(in_table - on_tree)[:20]:
            problems.append(f"species_traits.csv row {label!r} is not a tip of tree {number}")
    return len(trees[0]) if trees else 0, len(keys)


# Above this many table rows the row-by-row frictionless validation (pure
# Python) would take minutes, so only the vectorised checks run.
FULL_VALIDATION_ROWS = 50_000
_TRUE_FALSE = ["true", "false", "True", "False", "TRUE", "FALSE", "1", "0"]
# The lexical forms of Table Schema numbers and integers (Frictionless
# Table Schema v1, "number" and "integer" types); infinities and NaN as the
# specification spells them or as Python does.
_NUMBER = r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$|^[+-]?(inf|nan)$"
_INTEGER = r"^[+-]?\d+$"


def read_text_table(path: Path, columns: list[str] | None = None) -> pa.Table:
    """Read a bundle CSV with every field as text (an empty field is an
    empty string, never null), keeping only ``columns`` when given.

    Raises:
        OSError, UnicodeDecodeError, pyarrow.ArrowInvalid: the file cannot
            be read as CSV (unequal rows, bad UTF-8, no header).
    """
    # utf-8-sig: Arrow skips a byte-order mark, so the header read here must too.
    with path.open(encoding="utf-8-sig", newline="") as handle:
        header = next(csv.reader(handle), [])
    table = pacsv.read_csv(
        path,
        parse_options=pacsv.ParseOptions(newlines_in_values=True),
        convert_options=pacsv.ConvertOptions(
            column_types=dict.fromkeys(header, pa.string()),
            include_columns=columns,
            strings_can_be_null=False,
            quoted_strings_can_be_null=False,
        ),
    )
    # A column the header above did not name (a repeated name, say) was
    # typed by inference: make it text like the rest.
    for index, field in enumerate(table.schema):
        if not pa.types.is_string(field.type):
            text = pc.fill_null(pc.cast(table.column(index), pa.string()), "")
            table = table.set_column(index, field.name, text)
    return table


def _bad_cells(cells: pa.ChunkedArray, kind: str) -> np.ndarray:
    """Row indexes (from 0) of filled cells that do not fit ``kind``."""
    if kind == "integer":
        fits = pc.match_substring_regex(cells, _INTEGER)
    elif kind == "number":
        fits = pc.match_substring_regex(cells, _NUMBER, ignore_case=True)
    elif kind == "boolean":
        fits = pc.is_in(cells, pa.array(_TRUE_FALSE))
    else:
        return np.zeros(0, dtype=np.int64)
    bad = pc.and_(pc.not_equal(cells, ""), pc.invert(fits))
    return np.flatnonzero(bad.to_numpy(zero_copy_only=False))


def _check_table(folder: Path, resource: dict, problems: list[str]) -> int:
    """Check one CSV resource against its Table Schema, vectorised: the
    header names the fields in order, every cell fits its field's type, and
    the primary key is unique and filled. Returns the number of rows."""
    name = resource.get("name", "?")
    path = folder / str(resource.get("path", ""))
    if not path.is_file():
        problems.append(f"resource {name!r}: its file {resource.get('path')!r} is missing")
        return 0
    try:
        table = read_text_table(path)
    except (OSError, UnicodeDecodeError, pa.ArrowInvalid) as exc:
        problems.append(f"{path.name} cannot be read as CSV: {exc}")
        return 0
    fields = resource.get("schema", {}).get("fields", [])
    names = [f.get("name") for f in fields]
    if table.column_names != names:
        problems.append(f"{path.name}: its header {table.column_names} differs from its schema")
        return table.num_rows
    for field in fields:
        cells = table[field["name"]]
        kind = field.get("type", "string")
        for row in _bad_cells(cells, kind)[:5]:
            problems.append(
                f"{path.name} row {row + 2}, field {field['name']!r}: "
                f"{cells[int(row)].as_py()!r} is not of type {kind}"
            )
    for key in resource.get("schema", {}).get("primaryKey", []) or []:
        if key in table.column_names:
            values = pd.Series(table[key].to_numpy(zero_copy_only=False), dtype=object)
            for value in values[values.duplicated()].head(5):
                problems.append(f"{path.name}: primary key {key!r} repeats {value!r}")
            if (values == "").any():
                problems.append(f"{path.name}: primary key {key!r} has empty cells")
    return table.num_rows


def _check_package(folder: Path, problems: list[str]) -> None:
    from frictionless import Package

    path = folder / "datapackage.json"
    if not path.is_file():
        problems.append("datapackage.json is missing")
        return
    try:
        descriptor = jsontext.loads(path.read_text(encoding="utf-8"))
    except ValueError as exc:
        problems.append(f"datapackage.json is not valid JSON: {exc}")
        return
    # The frictionless library judges the descriptor against the Data
    # Package and Table Schema specifications.
    report = Package.validate_descriptor(descriptor, basepath=str(folder))
    problems += [f"datapackage.json: {error.message}" for error in report.errors]
    if not report.valid:
        return
    rows = sum(_check_table(folder, r, problems) for r in descriptor.get("resources", []))
    if rows <= FULL_VALIDATION_ROWS:
        full = Package(str(path)).validate()
        for task in full.tasks:
            problems += [f"{task.name}: {error.message}" for error in task.errors[:20]]


def _check_provenance(folder: Path, problems: list[str]) -> None:
    path = folder / "provenance.json"
    if not path.is_file():
        problems.append("provenance.json is missing")
        return
    try:
        data = jsontext.loads(path.read_text(encoding="utf-8"))
    except ValueError as exc:
        problems.append(f"provenance.json is not valid JSON: {exc}")
        return
    listed = {
        str(entry.get("source_id")) for entry in data.get("inputs", []) if entry.get("sha256")
    }
    used = folder / "measurements_used.csv"
    if used.is_file():
        try:
            cited = set(read_text_table(used, ["source_id"])["source_id"].unique().to_pylist())
        except (OSError, UnicodeDecodeError, KeyError, pa.ArrowInvalid) as exc:
            problems.append(f"measurements_used.csv: its source ids cannot be read: {exc}")
            cited = set()
        for source in sorted(cited - listed):
            problems.append(
                f"measurements_used.csv cites source {source} "
                "that provenance.json does not list with its sha256"
            )
    if not any(entry.get("kind") == "tree" for entry in data.get("inputs", [])):
        problems.append("provenance.json lists no tree source")
    for key in ("created", "options", "versions", "decisions"):
        if key not in data:
            problems.append(f"provenance.json has no {key!r}")


def _verify_folder(folder: Path, shown: str) -> VerifyReport:
    problems: list[str] = []
    for name in REQUIRED:
        if not (folder / name).is_file():
            problems.append(f"{name} is missing")
    checked = _check_checksums(folder, problems)
    tips, rows = _check_agreement(folder, problems)
    _check_package(folder, problems)
    _check_provenance(folder, problems)
    unique: list[str] = list(dict.fromkeys(problems))
    return VerifyReport(
        path=shown, files_checked=checked, tips=tips, trait_rows=rows, problems=unique
    )


def verify_bundle(path: str | os.PathLike[str]) -> VerifyReport:
    """Re-check a bundle folder or zip: checksums, that tree tips and trait
    rows agree one to one, that ``datapackage.json`` is a valid Data Package
    whose tables match their schemas (frictionless), and that provenance
    lists every input.

    Returns:
        :class:`VerifyReport` with every problem found (none: ``ok``).

    Raises:
        NotFoundError: nothing at ``path``, or a zip that is not one.
    """
    where = Path(path)
    if where.is_dir():
        return _verify_folder(where, str(where))
    if not where.is_file():
        raise NotFoundError(
            f"no bundle at {str(where)!r}", file=str(where), hint="give a bundle folder or its zip"
        )
    if not zipfile.is_zipfile(where):
        raise NotFoundError(
            f"{where.name!r} is neither a bundle folder nor a zip",
            file=str(where),
            hint="give the folder make-bundle wrote, or the zip it wrote with --zip",
        )
    with tempfile.TemporaryDirectory() as scratch, zipfile.ZipFile(where) as archive:
        for member in archive.namelist():
            target = Path(scratch, member).resolve()
            if not str(target).startswith(str(Path(scratch).resolve())):
                raise NotFoundError(
                    f"{where.name!r} holds a path outside the bundle: {member!r}", file=str(where)
                )
        archive.extractall(scratch)
        roots = [p for p in Path(scratch).iterdir() if p.is_dir()]
        folder = (
            roots[0]
            if len(roots) == 1 and not (Path(scratch) / CHECKSUM_FILE).exists()
            else Path(scratch)
        )
        return _verify_folder(folder, str(where))
