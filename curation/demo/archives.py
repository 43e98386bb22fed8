"""Writing Darwin Core Archives for the demo scenario: a zip with
``meta.xml``, ``eml.xml`` and tab-separated data files.

The layout follows the Darwin Core text guide (TDWG,
https://dwc.tdwg.org/text/, schema ``tdwg_dwc_text.xsd``): one core file
with an ``<id>`` column, extension files with a ``<coreid>`` column, each
``<field>`` naming its Darwin Core term by URI. The zip carries a fixed
timestamp so that one seed gives one byte-identical archive.
"""

from __future__ import annotations

import io
import zipfile
from dataclasses import dataclass
from pathlib import Path
from xml.sax.saxutils import escape

import pandas as pd

from curation.demo.scenario import DWC, ZIP_TIME

__all__ = ["ArchiveTable", "csv_text", "write_archive"]


@dataclass(frozen=True)
class ArchiveTable:
    """One data file of an archive: its row type (a Darwin Core class name
    such as ``Occurrence``), file name, and rows whose columns are term
    names (the first column is the id or core id)."""

    row_type: str
    location: str
    frame: pd.DataFrame


def csv_text(frame: pd.DataFrame, sep: str) -> str:
    """``frame`` as delimited text with a header line and '\\n' line ends."""
    buffer = io.StringIO()
    frame.to_csv(buffer, sep=sep, index=False, lineterminator="\n")
    return buffer.getvalue()


_ATTRIBUTES = (
    'encoding="UTF-8" fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" '
    'fieldsEnclosedBy="" ignoreHeaderLines="1"'
)


def _table_xml(element: str, key: str, table: ArchiveTable, first_field: int) -> list[str]:
    lines = [
        f'  <{element} {_ATTRIBUTES} rowType="{DWC}{table.row_type}">',
        f"    <files><location>{table.location}</location></files>",
        f'    <{key} index="0"/>',
    ]
    lines += [
        f'    <field index="{i}" term="{DWC}{name}"/>'
        for i, name in enumerate(table.frame.columns)
        if i >= first_field
    ]
    lines.append(f"  </{element}>")
    return lines


def meta_xml(core: ArchiveTable, extensions: list[ArchiveTable]) -> str:
    """Return the ``meta.xml`` describing ``core`` and ``extensions``.

    The core's first column is its id and is also mapped to its term; an
    extension's first column is the core id, a link rather than a term.
    """
    lines = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        '<archive xmlns="http://rs.tdwg.org/dwc/text/" metadata="eml.xml">',
        *_table_xml("core", "id", core, 0),
    ]
    for extension in extensions:
        lines += _table_xml("extension", "coreid", extension, 1)
    lines += ["</archive>", ""]
    return "\n".join(lines)


def _eml(package: str, title: str, creator: str) -> str:
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<eml:eml xmlns:eml="eml://ecoinformatics.org/eml-2.1.1"
         packageId="{escape(package)}" system="tipledger-demo">
  <dataset>
    <title>{escape(title)}</title>
    <creator><individualName><surName>{escape(creator)}</surName></individualName></creator>
    <intellectualRights><para>Invented data for demonstration; CC0.</para></intellectualRights>
  </dataset>
</eml:eml>
"""


def write_archive(
    path: Path,
    core: ArchiveTable,
    extensions: list[ArchiveTable],
    *,
    package: str,
    title: str,
    creator: str,
) -> None:
    """Write a Darwin Core Archive zip at ``path``."""
    members = {
        "meta.xml": meta_xml(core, extensions),
        "eml.xml": _eml(package, title, creator),
        core.location: csv_text(core.frame, "\t"),
    }
    for extension in extensions:
        members[extension.location] = csv_text(extension.frame, "\t")
    with zipfile.ZipFile(path, "w") as archive:
        for name, text in members.items():
            info = zipfile.ZipInfo(name, date_time=ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            archive.writestr(info, text.encode("utf-8"))
