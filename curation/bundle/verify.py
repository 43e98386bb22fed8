"""Checking a bundle after the fact: a folder or its zip, as an analyst (or
a reviewer) received it.

Every check runs and every problem is listed; nothing stops at the first.
"""

from __future__ import annotations

import json
import os
import tempfile
import zipfile
from pathlib import Path

import pandas as pd
from pydantic import BaseModel

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
        table = pd.read_csv(
            folder / "species_traits.csv", dtype={"tip_label": str}, keep_default_na=False
        )
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        problems.append(f"species_traits.csv cannot be read: {exc}")
        return 0, 0
    if "tip_label" not in table:
        problems.append("species_traits.csv has no tip_label column")
        return 0, len(table)
    keys = list(table["tip_label"])
    repeated = sorted({k for k in keys if keys.count(k) > 1}) if len(set(keys)) != len(keys) else []
    if repeated:
        problems.append(f"species_traits.csv repeats tip(s): {', '.join(repeated[:10])}")
    if trees is None:
        return 0, len(keys)
    for number, tips in enumerate(trees, start=1):
        on_tree, in_table = set(tips), set(keys)
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
_TRUE_FALSE = {"true", "false", "True", "False", "TRUE", "FALSE", "1", "0"}


def _check_table(folder: Path, resource: dict, problems: list[str]) -> int:
    """Check one CSV resource against its Table Schema with pandas: the
    header names the fields in order, every cell fits its field's type, and
    the primary key is unique and filled. Returns the number of rows."""
    name = resource.get("name", "?")
    path = folder / str(resource.get("path", ""))
    if not path.is_file():
        problems.append(f"resource {name!r}: its file {resource.get('path')!r} is missing")
        return 0
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError) as exc:
        problems.append(f"{path.name} cannot be read as CSV: {exc}")
        return 0
    fields = resource.get("schema", {}).get("fields", [])
    names = [f.get("name") for f in fields]
    if list(table.columns) != names:
        problems.append(f"{path.name}: its header {list(table.columns)} differs from its schema")
        return len(table)
    for field in fields:
        cells = table[field["name"]]
        filled = cells != ""
        kind = field.get("type", "string")
        if kind in {"integer", "number"}:
            # Vectorised: the text must read as a number (and a whole one).
            number = pd.to_numeric(cells.where(filled), errors="coerce")
            bad = filled & number.isna()
            if kind == "integer":
                bad |= filled & number.notna() & (number != number.round())
        elif kind == "boolean":
            bad = filled & ~cells.isin(_TRUE_FALSE)
        else:
            continue
        for row in bad[bad].index[:5]:
            problems.append(
                f"{path.name} row {row + 2}, field {field['name']!r}: "
                f"{cells[row]!r} is not of type {kind}"
            )
    for key in resource.get("schema", {}).get("primaryKey", []) or []:
        if key in table:
            repeated = table[key][table[key].duplicated()]
            for value in repeated.head(5):
                problems.append(f"{path.name}: primary key {key!r} repeats {value!r}")
            if (table[key] == "").any():
                problems.append(f"{path.name}: primary key {key!r} has empty cells")
    return len(table)


def _check_package(folder: Path, problems: list[str]) -> None:
    from frictionless import Package

    path = folder / "datapackage.json"
    if not path.is_file():
        problems.append("datapackage.json is missing")
        return
    try:
        descriptor = json.loads(path.read_text(encoding="utf-8"))
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
        data = json.loads(path.read_text(encoding="utf-8"))
    except ValueError as exc:
        problems.append(f"provenance.json is not valid JSON: {exc}")
        return
    listed = {
        str(entry.get("source_id")) for entry in data.get("inputs", []) if entry.get("sha256")
    }
    used = folder / "measurements_used.csv"
    if used.is_file():
        frame = pd.read_csv(used, usecols=["source_id"], dtype=str, keep_default_na=False)
        for source in sorted(set(frame["source_id"]) - listed):
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
