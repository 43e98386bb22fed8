"""Readers of file formats shared by the stages: decoding text, splitting
Newick files into trees, reading NEXUS blocks, and tabular files (CSV, TSV,
XLSX) and Darwin Core Archives (see ``tables`` and ``darwin_core``)."""

from curation.formats.newick import NewickPiece, relabel_tips, split_newick
from curation.formats.nexus import NexusFile, NexusTree, read_nexus
from curation.formats.text import decode_text, locate, shift_error

__all__ = [
    "NewickPiece",
    "NexusFile",
    "NexusTree",
    "decode_text",
    "locate",
    "read_nexus",
    "relabel_tips",
    "shift_error",
    "split_newick",
]
