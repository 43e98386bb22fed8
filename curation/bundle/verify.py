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


def _check_package(folder: Path, problems: list[str]) -> None:
    from frictionless import Package

    descriptor = folder / "datapackage.json"
    if not descriptor.is_file():
        problems.append("datapackage.json is missing")
        return
    try:
        package = Package(str(descriptor))
        report = package.validate()
    except Exception as exc:  # frictionless raises its own errors for bad descriptors
        problems.append(f"datapackage.json is not a valid Data Package: {exc}")
        return
    for task in report.tasks:
        for error in task.errors[:20]:
            problems.append(f"{task.name}: {error.message}")
    problems += [f"datapackage.json: {e.message}" for e in report.errors]


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
    listed = {entry.get("sha256") for entry in data.get("inputs", [])}
    used = folder / "measurements_used.csv"
    if used.is_file():
        frame = pd.read_csv(used, usecols=["source_sha256"], dtype=str, keep_default_na=False)
        for digest in sorted(set(frame["source_sha256"]) - listed):
            problems.append(
                f"measurements_used.csv cites source {digest[:12]}... "
                "that provenance.json does not list"
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
