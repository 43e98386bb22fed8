"""Reading tabular files: CSV and TSV (any delimiter) and ``.xlsx`` workbooks.

Every cell is read as the text written in the file; nothing is converted,
so the importers can keep each value as written beside what they parse
from it. Rows keep their number in the source (the header is row 1, as a
spreadsheet shows it), so every message and every stored record can point
back to the row it came from.

Encodings: a byte-order mark decides (UTF-8, UTF-16, UTF-32); otherwise
strict UTF-8 is tried first, and an 8-bit file that is not UTF-8 is read
as Windows-1252 (a superset of the printable Latin-1), unless
charset-normalizer recognises it as text of a script Windows-1252 cannot
spell (Cyrillic, Greek, CJK ...). ``encoding=`` overrides the guess.
"""

from __future__ import annotations

import codecs
import csv
import io
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from curation.errors import FormatError, InputError, NotFoundError, Problem

__all__ = [
    "DELIMITERS",
    "Table",
    "decode_in_encoding",
    "detect_delimiter",
    "detect_encoding",
    "parse_delimited",
    "read_table",
]

#: Delimiters tried when none is given, in order of preference on a tie.
DELIMITERS = (",", "\t", ";", "|")

# Byte-order marks, longest first (the UTF-32 LE mark starts with the UTF-16 LE one).
_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32"),
    (codecs.BOM_UTF32_BE, "utf-32"),
    (codecs.BOM_UTF8, "utf-8-sig"),
    (codecs.BOM_UTF16_LE, "utf-16"),
    (codecs.BOM_UTF16_BE, "utf-16"),
)

# charset-normalizer's guesses that mean "some Western or Central European
# 8-bit code page"; for those we read Windows-1252, because on short files
# the detector cannot tell cp1250 from cp1252 and trait tables in Latin
# script are far more often cp1252 (common practice of Windows spreadsheets).
_LATIN_GUESSES = {
    "ascii",
    "cp1250",
    "cp1252",
    "cp1254",
    "cp1257",
    "cp437",
    "cp850",
    "cp858",
    "iso8859_1",
    "iso8859_15",
    "iso8859_2",
    "iso8859_9",
    "latin_1",
    "mac_latin2",
    "mac_roman",
    "mac_iceland",
    "mac_turkish",
}

_XLSX_MAGIC = b"PK\x03\x04"
_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"


@dataclass
class Table:
    """A table as read from a file.

    Attributes:
        frame: one column per header cell, every cell the text as written
            ("" where the cell is empty), object dtype.
        row_numbers: the 1-based row number in the source of each row of
            ``frame`` (the header is row 1; blank rows are skipped but
            counted).
        file_name: the file's name, for messages.
        format: ``csv``, ``tsv`` or ``xlsx``.
        encoding: the text encoding used (``None`` for ``xlsx``).
        delimiter: the delimiter used (``None`` for ``xlsx``).
        sheet: the worksheet read (``None`` for text files).
    """

    frame: pd.DataFrame
    row_numbers: np.ndarray
    file_name: str
    format: str
    encoding: str | None = None
    delimiter: str | None = None
    sheet: str | None = None
    options: dict[str, str] = field(default_factory=dict)

    @property
    def columns(self) -> list[str]:
        """The header cells, in file order."""
        return [str(c) for c in self.frame.columns]


def detect_encoding(data: bytes, *, file_name: str = "") -> str:
    """Return the name of the text encoding of ``data`` (see the module notes).

    Raises:
        FormatError: the bytes do not look like text in any encoding (a
            binary file, or a spreadsheet saved in a format we do not read).
    """
    for bom, name in _BOMS:
        if data.startswith(bom):
            return name
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        pass
    else:
        return "utf-8"
    if b"\x00" in data[:65536]:
        raise FormatError(
            f"{file_name!r} holds NUL bytes: it is not a text table (or it is UTF-16 "
            "without a byte-order mark)",
            file=file_name or None,
            hint="save it as CSV (UTF-8), or give its encoding with --encoding, e.g. utf-16-le",
        )
    from charset_normalizer import from_bytes

    best = from_bytes(data[:1_000_000]).best()
    if best is None:
        raise FormatError(
            f"{file_name!r} does not look like text in any encoding tipledger recognises",
            file=file_name or None,
            hint="check that it is a CSV/TSV table, or give its encoding with --encoding",
        )
    guess = codecs.lookup(best.encoding).name.replace("-", "_")
    if guess in _LATIN_GUESSES or guess.startswith(("iso8859", "cp125", "mac_")):
        try:
            data.decode("cp1252")
        except UnicodeDecodeError:
            # The five bytes cp1252 leaves undefined: Latin-1 maps every byte.
            return "latin-1"
        return "cp1252"
    return best.encoding


def decode_in_encoding(data: bytes, encoding: str, *, file_name: str = "") -> str:
    """Return ``data`` decoded with ``encoding``, with any byte-order mark and
    universal newlines normalised to ``\\n``.

    Raises:
        InputError: the encoding is unknown.
        FormatError: the bytes are not valid in that encoding; the message
            gives the line and the bytes, and the hint the option.
    """
    try:
        codec = codecs.lookup(encoding)
    except LookupError:
        raise InputError(
            f"unknown text encoding {encoding!r}",
            file=file_name or None,
            field="encoding",
            hint="give a Python codec name with --encoding, e.g. utf-8, cp1252, latin-1, utf-16",
        ) from None
    try:
        text = data.decode(codec.name)
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        bad = data[exc.start : exc.end + 3]
        try:
            suggestion = detect_encoding(data, file_name=file_name)
        except FormatError:
            suggestion = "cp1252"
        raise FormatError(
            f"{file_name!r} is not valid {encoding} text: byte(s) {bad!r} at line {line} "
            f"cannot be decoded ({exc.reason})",
            file=file_name or None,
            line=line,
            hint=f"give the file's encoding with --encoding (it looks like {suggestion}), "
            "or leave --encoding out to detect it",
        ) from None
    text = text.removeprefix("\ufeff")
    return text.replace("\r\n", "\n").replace("\r", "\n")


def detect_delimiter(text: str, *, candidates: tuple[str, ...] = DELIMITERS) -> str:
    """Return the delimiter of the delimited ``text``.

    Each candidate splits the first lines with a CSV reader (so quoted
    fields are respected); the one that gives the header and most lines the
    same number of fields, and more than one field, wins. A tie goes to
    the earlier candidate. One column without any delimiter gives ``,``.
    """
    lines = [line for line in text[:200_000].split("\n")[:100] if line.strip()]
    if len(lines) > 1 and not text[:200_000].endswith("\n"):
        lines = lines[:-1]  # the last line of the sample may be cut short
    best, best_score = ",", (0.0, 0)
    for candidate in candidates:
        try:
            widths = [len(row) for row in csv.reader(lines, delimiter=candidate)]
        except csv.Error:
            continue
        if not widths or widths[0] < 2:
            continue
        agreement = sum(w == widths[0] for w in widths) / len(widths)
        score = (agreement, widths[0])
        if score > best_score:
            best, best_score = candidate, score
    return best


def parse_delimited(
    text: str,
    *,
    delimiter: str,
    file_name: str,
    quotechar: str | None = '"',
    header: bool = True,
    skip_lines: int = 0,
) -> tuple[pd.DataFrame, np.ndarray]:
    """Split delimited ``text`` into a frame of strings.

    Args:
        header: the first row (after ``skip_lines``) names the columns;
            otherwise columns are numbered 0, 1, 2 ...
        quotechar: the character that encloses fields, or ``None`` for none.
        skip_lines: leading lines to drop before reading.

    Returns:
        The frame (every cell a string, "" when empty; fully blank rows
        dropped) and the 1-based source row number of each of its rows.

    Raises:
        FormatError: a row has more fields than the header, or a quote is
            not closed; the message gives the line.
    """
    # Leading blank lines are not the header; count them so numbers stay true.
    stripped = text.lstrip("\n")
    leading = len(text) - len(stripped) + skip_lines
    if skip_lines:
        parts = stripped.split("\n", skip_lines)
        stripped = parts[-1] if len(parts) > skip_lines else ""
    options: dict[str, object] = {
        "sep": delimiter,
        "dtype": str,
        "keep_default_na": False,
        "na_filter": False,
        "skip_blank_lines": False,
        "header": 0 if header else None,
    }
    if quotechar is None:
        options["quoting"] = csv.QUOTE_NONE
    else:
        options["quotechar"] = quotechar
    options["engine"] = "c" if len(delimiter) == 1 else "python"
    try:
        frame = pd.read_csv(io.StringIO(stripped), **options)  # type: ignore[call-overload]
    except pd.errors.EmptyDataError:
        return pd.DataFrame(dtype=object), np.zeros(0, dtype=np.int64)
    except pd.errors.ParserError as exc:
        message = str(exc).strip()
        line = None
        words = message.replace(",", " ").split()
        if "line" in words:
            try:
                line = int(words[words.index("line") + 1]) + leading
            except (IndexError, ValueError):
                line = None
        raise FormatError(
            f"{file_name!r} cannot be split into columns with the delimiter "
            f"{delimiter!r}: {message}",
            file=file_name,
            line=line,
            hint="check the quoting of that line, or give the delimiter with --delimiter",
        ) from None
    frame = frame.fillna("").astype(object)
    first_data_row = 1 + leading + (1 if header else 0)
    numbers = np.arange(first_data_row, first_data_row + len(frame), dtype=np.int64)
    if len(frame):
        blank = (frame.apply(lambda column: column.str.strip()) == "").all(axis=1).to_numpy()
        if blank.any():
            frame = frame.loc[~blank].reset_index(drop=True)
            numbers = numbers[~blank]
    return frame, numbers


def _check_header(columns: list[str], frame: pd.DataFrame, file_name: str) -> pd.DataFrame:
    """Reject duplicated or nameless columns that hold data; drop nameless
    empty ones (a trailing delimiter)."""
    problems: list[Problem] = []
    keep: list[str] = []
    seen: dict[str, int] = {}
    for position, (name, key) in enumerate(zip(columns, frame.columns, strict=True), start=1):
        clean = name.strip()
        if not clean:
            if (frame[key].str.strip() != "").any():
                problems.append(
                    Problem(
                        "the column has values but no name in the header",
                        file=file_name,
                        column=position,
                        hint="give every column with data a name in the first row",
                    )
                )
            continue
        if clean in seen:
            problems.append(
                Problem(
                    f"the column name {clean!r} is used twice "
                    f"(columns {seen[clean]} and {position})",
                    file=file_name,
                    column=position,
                    hint="rename one of them in the header row",
                )
            )
            continue
        seen[clean] = position
        keep.append(key)
    if problems:
        raise FormatError(
            f"the header of {file_name!r} has {len(problems)} problem(s)",
            file=file_name,
            row=1,
            problems=problems,
        )
    result = frame[keep].copy()
    result.columns = [columns[list(frame.columns).index(k)].strip() for k in keep]
    return result


def _header_cells(text: str, delimiter: str) -> list[str]:
    first = text.lstrip("\n")
    reader = csv.reader(io.StringIO(first), delimiter=delimiter)
    try:
        return next(reader)
    except (StopIteration, csv.Error):
        return []


def _read_text_table(
    data: bytes, file_name: str, *, delimiter: str | None, encoding: str | None
) -> Table:
    used = encoding or detect_encoding(data, file_name=file_name)
    text = decode_in_encoding(data, used, file_name=file_name)
    if not text.strip():
        raise InputError(
            f"{file_name!r} is empty: there is nothing to import",
            file=file_name,
            hint="give a file that holds a header row and data rows",
        )
    if delimiter is None and file_name.lower().endswith((".tsv", ".tab")):
        delimiter = "\t"
    if delimiter in ("\\t", "tab", "TAB"):
        delimiter = "\t"
    used_delimiter = delimiter or detect_delimiter(text)
    frame, numbers = parse_delimited(text, delimiter=used_delimiter, file_name=file_name)
    if len(used_delimiter) == 1:
        # pandas renames duplicate headers ("mass.1"): check the raw header.
        header = _header_cells(text, used_delimiter)
        if len(header) == len(frame.columns):
            frame = _check_header(header, frame, file_name)
    return Table(
        frame=frame,
        row_numbers=numbers,
        file_name=file_name,
        format="tsv" if used_delimiter == "\t" else "csv",
        encoding=used,
        delimiter=used_delimiter,
    )


def _cell_text(value: object) -> str:
    """Return a worksheet cell's value as text a person would read in it."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    if hasattr(value, "isoformat"):
        return value.isoformat()  # type: ignore[no-any-return, union-attr]
    return str(value)


def _read_workbook(data: bytes, file_name: str, *, sheet: str | None) -> Table:
    if data.startswith(_OLE_MAGIC):
        raise FormatError(
            f"{file_name!r} is an old Excel .xls workbook, which tipledger does not read",
            file=file_name,
            hint="save it as .xlsx or as CSV and import that",
        )
    from zipfile import BadZipFile

    from openpyxl import load_workbook

    try:
        book = load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except (BadZipFile, KeyError, OSError, ValueError) as exc:
        if b"meta.xml" in data:
            raise FormatError(
                f"{file_name!r} is a zip with a meta.xml (a Darwin Core Archive), not a workbook",
                file=file_name,
                hint="import it with `tipledger import-darwin-core` (or import-synonyms "
                "for a checklist)",
            ) from None
        raise FormatError(
            f"{file_name!r} cannot be read as an .xlsx workbook: {exc}",
            file=file_name,
            hint="check that the file is an Excel workbook (.xlsx), or export it as CSV",
        ) from None
    try:
        names = list(book.sheetnames)
        if sheet is None:
            chosen = names[0]
        elif sheet in names:
            chosen = sheet
        elif sheet.isdigit() and 1 <= int(sheet) <= len(names):
            chosen = names[int(sheet) - 1]
        else:
            raise NotFoundError(
                f"{file_name!r} has no worksheet {sheet!r}; its sheets are "
                + ", ".join(repr(n) for n in names),
                file=file_name,
                field="sheet",
                hint="give one of those names (or its position, 1 = first) with --sheet",
            )
        rows = [[_cell_text(v) for v in row] for row in book[chosen].iter_rows(values_only=True)]
    finally:
        book.close()
    numbered = [(i, row) for i, row in enumerate(rows, start=1) if any(c.strip() for c in row)]
    if not numbered:
        raise InputError(
            f"the worksheet {chosen!r} of {file_name!r} is empty: there is nothing to import",
            file=file_name,
            field="sheet",
            hint="choose the sheet that holds the table with --sheet",
        )
    (header_row, header), body = numbered[0], numbered[1:]
    width = max(len(header), *(len(r) for _, r in body)) if body else len(header)
    header = header + [""] * (width - len(header))
    frame = pd.DataFrame(
        [r + [""] * (width - len(r)) for _, r in body],
        columns=list(range(width)),
        dtype=object,
    )
    if not body:
        frame = pd.DataFrame(columns=list(range(width)), dtype=object)
    frame = _check_header(header, frame, file_name)
    numbers = np.array([i for i, _ in body], dtype=np.int64)
    if header_row != 1:
        pass  # row numbers are the sheet's own, whatever row the header is on
    return Table(frame=frame, row_numbers=numbers, file_name=file_name, format="xlsx", sheet=chosen)


def read_table(
    data: bytes,
    *,
    file_name: str | os.PathLike[str] = "",
    delimiter: str | None = None,
    encoding: str | None = None,
    sheet: str | None = None,
) -> Table:
    """Read a CSV/TSV text table or an ``.xlsx`` workbook from ``data``.

    Args:
        file_name: the file's name, used in messages and to recognise
            ``.xlsx`` / ``.tsv``.
        delimiter: the field delimiter (``\\t`` or ``tab`` for a tab);
            detected when ``None``.
        encoding: the text encoding; detected when ``None``.
        sheet: the worksheet of a workbook, by name or 1-based position
            (default: the first).

    Returns:
        The :class:`Table` with every cell as text and source row numbers.

    Raises:
        InputError: the file or sheet is empty.
        NotFoundError: the sheet does not exist (the message lists them).
        FormatError: the bytes are not text in the encoding, the rows do
            not split into the header's columns, or the header repeats or
            leaves out column names.
    """
    name = Path(file_name).name if file_name else "<table>"
    if (
        data.startswith(_XLSX_MAGIC)
        or data.startswith(_OLE_MAGIC)
        or name.lower().endswith((".xlsx", ".xlsm"))
    ):
        table = _read_workbook(data, name, sheet=sheet)
    else:
        if sheet is not None:
            raise InputError(
                f"--sheet {sheet!r} was given but {name!r} is a text table, not a workbook",
                file=name,
                field="sheet",
                hint="leave --sheet out for CSV/TSV files",
            )
        table = _read_text_table(data, name, delimiter=delimiter, encoding=encoding)
    if table.frame.empty:
        raise InputError(
            f"{name!r} has a header but no data rows: there is nothing to import",
            file=name,
            hint="give a table with at least one row under the header",
        )
    return table
