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
from curation.imports.dwca import import_darwin_core
from curation.imports.synonyms import import_synonyms
from curation.imports.traits import import_traits
from curation.imports.trees import (
    TreeFileContents,
    TreeImportResult,
    import_trees,
    read_tree_file,
)

__all__ = [
    "ImportResult",
    "SourceInfo",
    "TreeFileContents",
    "TreeImportResult",
    "import_darwin_core",
    "import_synonyms",
    "import_traits",
    "import_trees",
    "read_source_bytes",
    "read_tree_file",
    "register_source",
    "sha256_of",
]
