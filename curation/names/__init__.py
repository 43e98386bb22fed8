"""Names: parsing written names, matching them to tips in stages, recording
decisions, and reviewing the pending ones in the terminal or a sheet."""

from curation.names.decisions import (
    DecisionResult,
    ReconcileReport,
    decide_name,
    decision_history,
    reconcile_names,
)
from curation.names.match import MATCH_COLUMNS, STAGES, MatchOptions, match_findings, match_names
from curation.names.parse import PARSED_COLUMNS, ParsedName, parse_name, parse_names
from curation.names.review import ReviewResult, review_names
from curation.names.sheet import SheetResult, export_review_sheet, import_review_sheet
from curation.names.summary import NameSummary, pending_names, summarise_names

__all__ = [
    "DecisionResult",
    "MATCH_COLUMNS",
    "MatchOptions",
    "NameSummary",
    "PARSED_COLUMNS",
    "ParsedName",
    "ReconcileReport",
    "ReviewResult",
    "STAGES",
    "SheetResult",
    "decide_name",
    "decision_history",
    "export_review_sheet",
    "import_review_sheet",
    "match_findings",
    "match_names",
    "parse_name",
    "parse_names",
    "pending_names",
    "reconcile_names",
    "review_names",
    "summarise_names",
]
