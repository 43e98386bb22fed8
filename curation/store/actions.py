"""The actions of the ledger: one spelling for each, in one place.

An event's action is the name of the command that made it, in lower case
with hyphens (``import-trees``, ``reconcile-names``, ``make-ultrametric``),
so a person reading the ledger sees the words they typed. Stages group the
actions by what they touch; the state rules (staleness, what a bundle
depends on) ask these groups rather than spelling actions themselves.
"""

from __future__ import annotations

import re

__all__ = [
    "ACTIONS",
    "BUNDLE_ACTIONS",
    "CHECK_ACTIONS",
    "DECISION_ACTIONS",
    "DEFINITION_ACTIONS",
    "FLAG_ACTIONS",
    "IMPORT_ACTIONS",
    "REPAIR_ACTIONS",
    "REVIEW_ACTIONS",
    "STORE_ACTIONS",
    "check_action",
    "import_action",
]

#: Imports of sources, by the kind of source (and DwC for Darwin Core archives of traits).
IMPORT_ACTIONS = {
    "tree": "import-trees",
    "trait": "import-traits",
    "dwca": "import-darwin-core",
    "synonym": "import-synonyms",
}
#: Events that record name decisions for a lineage of tree sets.
DECISION_ACTIONS = ("reconcile-names", "decide-name", "review-names", "import-review-sheet")
#: A curator's exclusions and re-inclusions of measurements.
REVIEW_ACTIONS = ("exclude-measurements", "include-measurements")
#: Definitions of traits (unit, scale, range, states).
DEFINITION_ACTIONS = ("define-traits",)
#: The record of the fault flags of the measurements, for a lineage.
FLAG_ACTIONS = ("flag-measurements",)
#: Checks of trees or tree sets.
CHECK_ACTIONS = ("check-trees",)
#: Repairs, each deriving a new tree set (the repair's name is its action).
REPAIR_ACTIONS = (
    "prune-trees",
    "resolve-polytomies",
    "collapse-short-branches",
    "make-ultrametric",
    "lengthen-zero-tips",
    "sort-children",
)
#: Bundles written from the store.
BUNDLE_ACTIONS = ("make-bundle",)
#: Changes to the store itself.
STORE_ACTIONS = ("upgrade-store",)

ACTIONS = frozenset(
    (
        *IMPORT_ACTIONS.values(),
        *DECISION_ACTIONS,
        *REVIEW_ACTIONS,
        *DEFINITION_ACTIONS,
        *FLAG_ACTIONS,
        *CHECK_ACTIONS,
        *REPAIR_ACTIONS,
        *BUNDLE_ACTIONS,
        *STORE_ACTIONS,
    )
)

_SPELLING = re.compile(r"[a-z]+(?:-[a-z]+)*")


def check_action(action: str) -> str:
    """Return ``action`` when it is one of :data:`ACTIONS`.

    Raises:
        ValueError: an action no stage defines (a programming error, not bad
            input: every event must be one a person can look up).
    """
    if action not in ACTIONS or not _SPELLING.fullmatch(action):
        raise ValueError(f"{action!r} is not a ledger action (see curation.store.actions)")
    return action


def import_action(kind: str, format: str = "") -> str:
    """Return the action of importing a source of ``kind`` (tree, trait or
    synonym) in ``format`` (a Darwin Core Archive of traits has its own)."""
    if kind == "trait" and format == "dwca":
        return IMPORT_ACTIONS["dwca"]
    return IMPORT_ACTIONS[kind]
