"""Names: parsing written names, matching them to tips in stages, recording
decisions and reviewing the pending ones."""

from curation.names.parse import PARSED_COLUMNS, ParsedName, parse_name, parse_names

__all__ = ["PARSED_COLUMNS", "ParsedName", "parse_name", "parse_names"]
