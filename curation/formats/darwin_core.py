"""Reading Darwin Core Archives: a zip with a ``meta.xml`` descriptor, one
core data file and any number of extension files.

The descriptor follows the Darwin Core text guide (TDWG): ``<archive>``
holds one ``<core>`` and zero or more ``<extension>`` elements, each with
a ``rowType`` (a class URI such as ``http://rs.tdwg.org/dwc/terms/Occurrence``),
``<files><location>``, an ``<id index=..>`` (core) or ``<coreid index=..>``
(extension) and ``<field index=.. term=.. default=..>`` elements; the
attributes ``fieldsTerminatedBy`` (default ``,``), ``fieldsEnclosedBy``
(default ``"``; empty for none), ``linesTerminatedBy`` (default ``\\n``),
``ignoreHeaderLines`` (default 0) and ``encoding`` (default UTF-8) say how
to read each file. Fields are named here by the last part of their term
URI (``scientificName``), the way the Darwin Core Quick Reference Guide
names terms.
"""

from __future__ import annotations

import io
import posixpath
import zipfile
from dataclasses import dataclass, field
from xml.etree import ElementTree

import numpy as np
import pandas as pd

from curation.errors import FormatError, Problem
from curation.formats.tables import decode_in_encoding, parse_delimited

__all__ = [
    "DWC",
    "OCCURRENCE",
    "TAXON",
    "MEASUREMENT_OR_FACT",
    "EXTENDED_MEASUREMENT_OR_FACT",
    "Archive",
    "ArchiveFile",
    "read_archive",
    "term_name",
]

#: The namespace of the Darwin Core terms (TDWG).
DWC = "http://rs.tdwg.org/dwc/terms/"
OCCURRENCE = DWC + "Occurrence"
TAXON = DWC + "Taxon"
MEASUREMENT_OR_FACT = DWC + "MeasurementOrFact"
#: The OBIS extension that adds identifiers to MeasurementOrFact rows.
EXTENDED_MEASUREMENT_OR_FACT = "http://rs.iobis.org/obis/terms/ExtendedMeasurementOrFact"


def term_name(uri: str) -> str:
    """Return the short name of a term URI: the part after the last ``/`` or ``#``."""
    return uri.rstrip("/").replace("#", "/").rsplit("/", 1)[-1]


@dataclass
class ArchiveFile:
    """One data file of an archive, read.

    Attributes:
        row_type: the ``rowType`` URI.
        location: the file's path inside the zip.
        frame: one column per mapped term, by short name (``scientificName``),
            plus ``_id`` (the core id or extension core id); all strings.
        row_numbers: 1-based row number of each frame row in the file
            (header lines counted).
        terms: short name -> full term URI.
    """

    row_type: str
    location: str
    frame: pd.DataFrame
    row_numbers: np.ndarray
    terms: dict[str, str] = field(default_factory=dict)

    @property
    def kind(self) -> str:
        """The short name of the row type, e.g. ``Occurrence``."""
        return term_name(self.row_type)


@dataclass
class Archive:
    """A Darwin Core Archive: its core file and extension files."""

    file_name: str
    core: ArchiveFile
    extensions: list[ArchiveFile]

    def extension(self, *row_types: str) -> ArchiveFile | None:
        """Return the first extension of one of ``row_types``, or ``None``."""
        return next((e for e in self.extensions if e.row_type in row_types), None)


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _unescape(value: str) -> str:
    # meta.xml writes tab and newline as the two characters \t and \n.
    return value.replace("\\t", "\t").replace("\\r", "\r").replace("\\n", "\n")


def _child(element: ElementTree.Element, name: str) -> ElementTree.Element | None:
    return next((c for c in element if _local(c.tag) == name), None)


def _children(element: ElementTree.Element, name: str) -> list[ElementTree.Element]:
    return [c for c in element if _local(c.tag) == name]


def _not_archive(file_name: str, why: str) -> FormatError:
    return FormatError(
        f"{file_name!r} is not a Darwin Core Archive: {why}",
        file=file_name,
        hint="a Darwin Core Archive is a zip holding meta.xml (the descriptor of the TDWG "
        "Darwin Core text guide) and the data files it names; for a plain table use "
        "import-traits or import-synonyms",
    )


def _read_file(
    zipped: zipfile.ZipFile,
    base: str,
    element: ElementTree.Element,
    *,
    file_name: str,
    id_tag: str,
) -> ArchiveFile:
    """Read one ``<core>`` or ``<extension>`` with its descriptor attributes."""
    role = _local(element.tag)
    row_type = element.get("rowType", "")
    files = _child(element, "files")
    location_element = None if files is None else _child(files, "location")
    location = (location_element.text or "").strip() if location_element is not None else ""
    where = f"{file_name}!meta.xml <{role} rowType={row_type!r}>"
    if not location:
        raise FormatError(
            f"{where} names no data file (<files><location>)",
            file=file_name,
            hint="add <files><location>file.txt</location></files> to the descriptor",
        )
    path = posixpath.normpath(posixpath.join(base, location)) if base else location
    try:
        raw = zipped.read(path)
    except KeyError:
        raise FormatError(
            f"{where} names the data file {location!r}, which is not in the zip",
            file=file_name,
            field=location,
            hint="files in the zip: " + ", ".join(repr(n) for n in zipped.namelist()),
        ) from None
    encoding = element.get("encoding") or "UTF-8"
    delimiter = _unescape(element.get("fieldsTerminatedBy", ","))
    enclosed = _unescape(element.get("fieldsEnclosedBy", '"'))
    lines_end = _unescape(element.get("linesTerminatedBy", "\n"))
    try:
        skip = int(element.get("ignoreHeaderLines", "0") or 0)
    except ValueError:
        raise FormatError(
            f"{where}: ignoreHeaderLines={element.get('ignoreHeaderLines')!r} is not a number",
            file=file_name,
        ) from None
    inner = f"{file_name}!{path}"
    text = decode_in_encoding(raw, encoding, file_name=inner)
    if lines_end not in ("\n", "\r\n", "\r"):
        text = text.replace(lines_end, "\n")
    if not delimiter:
        raise FormatError(f"{where}: fieldsTerminatedBy is empty", file=file_name)
    frame, numbers = parse_delimited(
        text,
        delimiter=delimiter,
        file_name=inner,
        quotechar=enclosed or None,
        header=False,
        skip_lines=skip,
    )
    width = frame.shape[1]
    if width == 0:
        # A data file with no rows: every mapped term is an empty column.
        frame = pd.DataFrame(index=pd.RangeIndex(0))
        width = 1 + max(
            (int(n.get("index", 0)) for n in element if (n.get("index") or "").isdigit()),
            default=0,
        )
        frame = pd.DataFrame({i: pd.Series([], dtype=object) for i in range(width)})
    problems: list[Problem] = []
    columns: dict[str, pd.Series] = {}
    terms: dict[str, str] = {}

    def index_of(node: ElementTree.Element, what: str) -> int | None:
        value = node.get("index")
        if value is None:
            return None
        try:
            index = int(value)
        except ValueError:
            problems.append(Problem(f"{what} has index={value!r}, not a number", file=inner))
            return None
        if not 0 <= index < width:
            problems.append(
                Problem(
                    f"{what} has index {index} but the rows have {width} columns "
                    f"(indexes 0 to {width - 1})",
                    file=inner,
                )
            )
            return None
        return index

    id_element = _child(element, id_tag)
    if id_element is not None:
        index = index_of(id_element, f"<{id_tag}>")
        if index is not None:
            columns["_id"] = frame[index].astype(object).str.strip()
    for node in _children(element, "field"):
        term = node.get("term", "")
        if not term:
            problems.append(Problem("a <field> has no term attribute", file=inner))
            continue
        name = term_name(term)
        default = node.get("default")
        index = index_of(node, f"the field {name!r}")
        if index is not None:
            values = frame[index].astype(object).str.strip()
            if default is not None:
                values = values.where(values != "", default)
        elif node.get("index") is None and default is not None:
            values = pd.Series([default] * len(frame), index=frame.index, dtype=object)
        else:
            continue
        columns[name] = values
        terms[name] = term
    if problems:
        raise FormatError(
            f"{where} does not fit its data file {location!r} ({len(problems)} problem(s))",
            file=file_name,
            problems=problems,
            hint="correct the index attributes in meta.xml",
        )
    result = pd.DataFrame(columns, index=frame.index).reset_index(drop=True)
    return ArchiveFile(row_type, path, result, numbers, terms)


def read_archive(data: bytes, *, file_name: str = "<archive>") -> Archive:
    """Read a Darwin Core Archive from the bytes of its zip.

    Returns:
        The :class:`Archive` with its core and extensions read.

    Raises:
        FormatError: the bytes are not a zip, the zip has no ``meta.xml``,
            the descriptor is not valid XML or has no ``<core>``, a data file
            it names is missing or does not decode, or a field index is
            outside the rows.
    """
    try:
        zipped = zipfile.ZipFile(io.BytesIO(data))
    except zipfile.BadZipFile:
        raise _not_archive(file_name, "it is not a zip file") from None
    with zipped:
        names = zipped.namelist()
        descriptors = sorted(
            (n for n in names if posixpath.basename(n) == "meta.xml"), key=lambda n: n.count("/")
        )
        if not descriptors:
            raise _not_archive(
                file_name,
                "the zip has no meta.xml (it holds "
                + (", ".join(repr(n) for n in names[:10]) or "nothing")
                + ")",
            )
        descriptor = descriptors[0]
        base = posixpath.dirname(descriptor)
        try:
            root = ElementTree.fromstring(zipped.read(descriptor))
        except ElementTree.ParseError as exc:
            line = exc.position[0] if exc.position else None
            raise FormatError(
                f"{file_name}!{descriptor} is not well-formed XML: {exc}",
                file=file_name,
                line=line,
                hint="repair meta.xml (see the TDWG Darwin Core text guide)",
            ) from None
        if _local(root.tag) != "archive":
            raise _not_archive(
                file_name, f"meta.xml's root element is <{_local(root.tag)}>, not <archive>"
            )
        core_element = _child(root, "core")
        if core_element is None:
            raise _not_archive(file_name, "meta.xml has no <core> element")
        core = _read_file(zipped, base, core_element, file_name=file_name, id_tag="id")
        extensions = [
            _read_file(zipped, base, element, file_name=file_name, id_tag="coreid")
            for element in _children(root, "extension")
        ]
    return Archive(file_name=file_name, core=core, extensions=extensions)
