"""Importers: one per kind of source, each one transaction with one ledger
event. Trees (Newick, NEXUS, NeXML), trait tables (CSV/TSV/XLSX, Darwin
Core Archives) and synonym tables."""

from curation.imports.common import (
    ImportResult,
    SourceInfo,
    read_source_bytes,
    register_source,
    sha256_of,
)

__all__ = ["ImportResult", "SourceInfo", "read_source_bytes", "register_source", "sha256_of"]
