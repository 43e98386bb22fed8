"""Writing a bundle's files byte for byte the same on every run: tables as
CSV, trees as Newick or NEXUS, the checksum list and the zip.

Determinism rules: rows and columns in a fixed order, numbers in their
shortest round-trip form (the same float always gives the same text, and
reads back exactly), '\\n' line ends, UTF-8
without a byte-order mark, zip entries sorted and stamped with one time.

Tables are spelled column by column with Arrow's vectorised kernels (a
bundle's measurements table has a million rows): each column becomes text
once, fields are quoted only where CSV needs it (RFC 4180: a comma, a
quote or a line break), and the joined lines are written straight from
Arrow's buffer.
"""

from __future__ import annotations

import hashlib
import re
import zipfile
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from curation.timestamps import now
from curation.trees.arrays import TreeArrays, to_newick

__all__ = [
    "CHECKSUM_FILE",
    "checksum_lines",
    "nexus_label",
    "read_checksums",
    "sha256_file",
    "write_csv",
    "write_newick",
    "write_nexus",
    "write_zip",
]

CHECKSUM_FILE = "SHA256SUMS"

# NEXUS punctuation (Maddison, Swofford and Maddison 1997, Systematic
# Biology 46:590-621): a label holding any of these, or a blank, is quoted.
_NEXUS_PUNCTUATION = re.compile(r"""[\s()\[\]{}/\\,;:=*'"`+<>-]""")


# Rows spelled and written per slice, so the text of a large table is never
# all in memory at once.
_CSV_SLICE_ROWS = 200_000
_TEXT = pa.large_string()
_QUOTE, _COMMA, _NOTHING, _LINE_END = (pa.scalar(t, _TEXT) for t in ('"', ",", "", "\n"))


def _quoted(text: pa.Array, *, quote_empty: bool) -> pa.Array:
    """Quote the fields that need it (RFC 4180), doubling inner quotes; an
    empty field is quoted too when ``quote_empty`` (a one-column table,
    where a bare empty field would be a blank line)."""
    needs = pc.match_substring_regex(text, r'[,"\r\n]')
    if quote_empty:
        needs = pc.or_(needs, pc.equal(pc.binary_length(text), 0))
    if not pc.any(needs).as_py():
        return text
    doubled = pc.replace_substring(text, '"', '""')
    wrapped = pc.binary_join_element_wise(_QUOTE, doubled, _QUOTE, _NOTHING)
    return pc.if_else(needs, wrapped, text)


def _column_text(column: pd.Series, *, quote_empty: bool) -> pa.Array:
    """Return one column as CSV fields: booleans as True/False, floats in
    their shortest round-trip form, missing values (None, NaN, NA) empty,
    anything else as ``str`` of the value."""
    if column.dtype.kind == "f":
        values = column.to_numpy(dtype=float)
        # NaN is missing; infinities are spelled inf / -inf.
        array = pa.array(values, mask=np.isnan(values))
    elif column.dtype.kind == "b" or str(column.dtype) == "boolean":
        flags = pa.array(column.astype("boolean"), from_pandas=True, type=pa.bool_())
        array = pc.if_else(flags, "True", "False")
    elif column.dtype.kind in "iu" or str(column.dtype) in {"Int64", "Int32"}:
        array = pa.array(column, from_pandas=True)
    else:
        array = pa.array(column.astype("str"), from_pandas=True, type=pa.string())
    if isinstance(array, pa.ChunkedArray):  # Arrow-backed pandas columns
        array = array.combine_chunks()
    text = pc.fill_null(pc.cast(array, _TEXT), _NOTHING)
    return _quoted(text, quote_empty=quote_empty)


def _csv_bytes(text: pa.Array) -> memoryview:
    """The bytes of a string array without nulls, straight from its buffers."""
    offsets = np.frombuffer(text.buffers()[1], dtype=np.int64)
    start, end = offsets[text.offset], offsets[text.offset + len(text)]
    return memoryview(text.buffers()[2])[start:end]


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """Write ``frame`` as UTF-8 CSV with '\\n' line ends: a header of the
    column names, then one line per row. Fields are quoted only where
    needed; floats are written in their shortest round-trip form; NaN,
    None and NA are empty fields; booleans are True/False."""
    one_column = len(frame.columns) == 1
    header = pa.array([str(c) for c in frame.columns], type=_TEXT)
    names = _quoted(header, quote_empty=one_column).to_pylist()
    with path.open("wb") as handle:
        handle.write((",".join(names) + "\n").encode("utf-8"))
        for start in range(0, len(frame), _CSV_SLICE_ROWS):
            part = frame.iloc[start : start + _CSV_SLICE_ROWS]
            fields = [_column_text(part[c], quote_empty=one_column) for c in part.columns]
            # Every line ends with '\n': join the fields, then the line end.
            lines = pc.binary_join_element_wise(*fields, _COMMA) if len(fields) > 1 else fields[0]
            ended = pc.binary_join_element_wise(lines, _NOTHING, _LINE_END)
            handle.write(_csv_bytes(ended))


def write_newick(trees: list[TreeArrays], path: Path) -> None:
    """Write each tree as one Newick line (labels quoted only where needed)."""
    path.write_text("".join(to_newick(t) + "\n" for t in trees), encoding="utf-8")


def nexus_label(label: str) -> str:
    """Return ``label`` as a NEXUS word: quoted (with '' for a quote) when it
    holds NEXUS punctuation or a blank."""
    if label and not _NEXUS_PUNCTUATION.search(label):
        return label
    return "'" + label.replace("'", "''") + "'"


def _without_internal_labels(tree: TreeArrays, tip_token: dict[str, str]) -> TreeArrays:
    labels = [
        tip_token[label] if is_tip else ""
        for label, is_tip in zip(tree.labels, tree.is_tip, strict=True)
    ]
    return TreeArrays(tree.parent, tree.edge_length, labels, tree.rooted)


def write_nexus(trees: list[tuple[str, TreeArrays]], order: list[str], path: Path) -> None:
    """Write a NEXUS file with a TAXA block listing ``order`` and a TREES
    block whose TRANSLATE maps 1..n to those labels in that order.

    Internal node labels are left out: a number there could be read as a
    TRANSLATE token by some readers.
    """
    token = {label: str(i + 1) for i, label in enumerate(order)}
    lines = [
        "#NEXUS",
        "BEGIN TAXA;",
        f"    DIMENSIONS NTAX={len(order)};",
        "    TAXLABELS",
        *(f"        {nexus_label(label)}" for label in order),
        "    ;",
        "END;",
        "BEGIN TREES;",
        "    TRANSLATE",
    ]
    lines += [
        f"        {token[label]} {nexus_label(label)}{',' if i < len(order) - 1 else ''}"
        for i, label in enumerate(order)
    ]
    lines.append("    ;")
    for name, tree in trees:
        # to_newick writes the rooting comment ([&R] / [&U]) itself.
        text = to_newick(_without_internal_labels(tree, token))
        lines.append(f"    TREE {nexus_label(name)} = {text}")
    lines.append("END;")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def sha256_file(path: Path) -> str:
    """Return the hex sha256 of the file at ``path``, read in blocks."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def checksum_lines(folder: Path) -> str:
    """Return the checksum list of every file under ``folder`` (but the list
    itself) in the format ``sha256sum -c`` reads: hash, two blanks, path."""
    files = sorted(
        p.relative_to(folder).as_posix()
        for p in folder.rglob("*")
        if p.is_file() and p.name != CHECKSUM_FILE
    )
    return "".join(f"{sha256_file(folder / name)}  {name}\n" for name in files)


def read_checksums(text: str) -> tuple[dict[str, str], list[int]]:
    """Parse a checksum list; return (path -> hash, numbers of bad lines)."""
    entries: dict[str, str] = {}
    bad: list[int] = []
    for number, line in enumerate(text.splitlines(), start=1):
        match = re.fullmatch(r"([0-9a-f]{64}) [ *](.+)", line)
        if match is None:
            bad.append(number)
            continue
        entries[match.group(2)] = match.group(1)
    return entries, bad


def _zip_time() -> tuple[int, int, int, int, int, int]:
    stamp: datetime = now()
    # Zip times cannot be before 1980; the clock honours SOURCE_DATE_EPOCH.
    year = max(stamp.year, 1980)
    return (year, stamp.month, stamp.day, stamp.hour, stamp.minute, stamp.second - stamp.second % 2)


def write_zip(folder: Path, path: Path, root: str) -> None:
    """Write every file of ``folder`` into the zip ``path`` under ``root/``,
    sorted, with one timestamp and fixed permissions, so that the same
    folder gives the same bytes."""
    stamp = _zip_time()
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        for file in sorted(p for p in folder.rglob("*") if p.is_file()):
            info = zipfile.ZipInfo(f"{root}/{file.relative_to(folder).as_posix()}", stamp)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            archive.writestr(info, file.read_bytes())


def finite_or_none(values: np.ndarray) -> list[float | None]:
    """Return ``values`` as floats with NaN and infinities as None (for JSON)."""
    return [float(v) if np.isfinite(v) else None for v in values]
