"""Turning the bytes of a text file into text, and saying where a position
in that text is (line and column) for error messages.

Text formats are read as UTF-8 (a byte-order mark is allowed). A file in
another encoding is refused with a message that names the encoding it
looks like and how to convert it, rather than read with wrong characters.
"""

from __future__ import annotations

from dataclasses import replace

from curation.errors import FormatError, Problem

__all__ = ["decode_text", "locate", "shift_error", "shift_problem"]

_UTF8_BOM = b"\xef\xbb\xbf"


def locate(text: str, position: int) -> tuple[int, int]:
    """Return the 1-based (line, column) of character ``position`` in ``text``."""
    line = text.count("\n", 0, position) + 1
    column = position - (text.rfind("\n", 0, position) + 1) + 1
    return line, column


def _shifted(text: str, offset: int, line: int | None, column: int | None) -> tuple[int, int]:
    base_line, base_column = locate(text, offset)
    line = line or 1
    column = column or 1
    if line == 1:
        return base_line, base_column + column - 1
    return base_line + line - 1, column


def shift_error(error: FormatError, text: str, offset: int) -> FormatError:
    """Return ``error`` (raised while reading ``text[offset:]``) with its line
    and column made relative to the whole of ``text``."""
    line, column = _shifted(text, offset, error.line, error.column)
    return FormatError(
        error.message,
        file=error.file,
        line=line,
        column=column,
        hint=error.hint,
        problems=error.problems,
    )


def shift_problem(problem: Problem, text: str, offset: int) -> Problem:
    """Return ``problem`` with its line and column made relative to ``text``."""
    line, column = _shifted(text, offset, problem.line, problem.column)
    return replace(problem, line=line, column=column)


def _utf16_kind(data: bytes) -> str | None:
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return "UTF-16" + ("LE" if data[:2] == b"\xff\xfe" else "BE")
    head = data[:4000]
    if len(head) >= 2 and head.count(b"\x00") * 3 >= len(head):
        # Text of ASCII characters in UTF-16 has a NUL in every other byte.
        return "UTF-16" + ("LE" if head[1:2] == b"\x00" else "BE")
    return None


def decode_text(data: bytes, *, file: str | None = None, what: str = "text files") -> str:
    """Return ``data`` decoded as UTF-8 (without a byte-order mark).

    Args:
        data: the file's bytes.
        file: the file name for messages.
        what: what kind of file this is, for messages ("tree files").

    Raises:
        FormatError: the bytes are UTF-16, or not valid UTF-8 (Latin-1 or
            Windows-1252 text, say); the message gives the line and column
            of the first bad byte, the encoding the file looks like, and a
            command that converts it.
    """
    if data.startswith(_UTF8_BOM):
        data = data[len(_UTF8_BOM) :]
    name = file or "the file"
    utf16 = _utf16_kind(data)
    if utf16:
        raise FormatError(
            f"{name} is encoded as {utf16}, not UTF-8; {what} are read as UTF-8",
            file=file,
            line=1,
            column=1,
            hint=f"save the file as UTF-8, for example: iconv -f {utf16} -t UTF-8 IN > OUT",
        )
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        position = exc.start
        bad = data[position]
        line = data.count(b"\n", 0, position) + 1
        line_start = data.rfind(b"\n", 0, position) + 1
        column = len(data[line_start:position].decode("utf-8", errors="replace")) + 1
        # Bytes 0x80-0x9F are control characters in Latin-1 but letters and
        # punctuation in Windows-1252 (common practice: spreadsheet and
        # editor exports on Windows).
        encoding = "Windows-1252" if 0x80 <= bad <= 0x9F else "Latin-1 (ISO-8859-1)"
        iconv = "WINDOWS-1252" if 0x80 <= bad <= 0x9F else "LATIN1"
        shown = data[position : position + 1].decode("cp1252", errors="replace")
        others = data.decode("utf-8", errors="replace").count("\ufffd") - 1
        more = f" ({others} more such bytes follow)" if others > 0 else ""
        raise FormatError(
            f"byte 0x{bad:02X} is not UTF-8{more}: the file looks like {encoding} text "
            f"(where that byte is {shown!r}); {what} are read as UTF-8",
            file=file,
            line=line,
            column=column,
            hint=f"convert the file to UTF-8 first, e.g.: iconv -f {iconv} -t UTF-8 IN > OUT",
        ) from None
