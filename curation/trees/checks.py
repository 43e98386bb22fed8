"""Checks of one tree: everything comparative methods assume and real
trees often break, each problem reported as a :class:`~curation.findings.Finding`.

:func:`check_tree` runs on the array view alone, in vectorised NumPy
(O(n) apart from the O(n log n) node naming), and never builds an n x n
matrix unless asked (``matrix=True``, see :mod:`curation.trees.matrix`).
Nodes are named stably by two tips and a tip count
(:mod:`curation.trees.nodes`), so a finding survives reordering and re-reading.

A branch is *near zero* when it is shorter than a share of the tree's
height (:data:`DEFAULT_NEAR_ZERO`, see :func:`near_zero_branches`); the
zero-length findings and the repair that lengthens zero-length tips use
that one rule, and exact zeros are always caught.

Finding codes:

==============================  ========  ==========================================
code                            severity  what
==============================  ========  ==========================================
tree.polytomy                   warning   an internal node with more than two children
tree.basal_trifurcation         warning   three children at the root of a tree meant to be rooted
tree.single_child_node          warning   an internal node with one child
tree.zero_length_terminal       warning   a tip's branch of length 0, or near zero
tree.zero_length_internal       info      an internal branch of length 0, or near zero
tree.negative_length            error     a branch length below 0
tree.no_branch_lengths          error     no branch has a length
tree.missing_branch_lengths     error     some branches have a length and some do not
tree.not_ultrametric            warning   root-to-tip distances spread more than the tolerance
tree.duplicate_label            error     one tip label on several tips
tree.empty_label                error     tips without a label
tree.label_needs_quotes         info      a label that survives Newick only when quoted
tree.branch_length_outlier      warning   a branch extremely long for this tree
==============================  ========  ==========================================
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd
from pydantic import BaseModel
from sqlalchemy import select

from curation.errors import InputError
from curation.findings import Finding, Severity, findings_frame
from curation.store.engine import Store
from curation.store.ledger import record_event, record_findings
from curation.store.models import LedgerEvent, StoredFinding, Tree
from curation.trees.arrays import TreeArrays, path_sums
from curation.trees.nodes import NodeNames, name_nodes
from curation.trees.stored import get_tree_set, load_tree, load_tree_set

__all__ = [
    "DEFAULT_NEAR_ZERO",
    "DEFAULT_OUTLIER_THRESHOLD",
    "DEFAULT_TOLERANCE",
    "FINDING_PHRASES",
    "ROUNDING_SPREAD_LIMIT",
    "TreeCheckReport",
    "UltrametricReport",
    "check_tree",
    "check_trees",
    "measure_ultrametricity",
    "near_zero_branches",
    "near_zero_cutoff",
    "tree_findings",
    "ultrametric_explanation",
    "validate_check_options",
    "validate_near_zero",
]

DEFAULT_TOLERANCE = 1e-6
"""Largest spread of root-to-tip distances, relative to the tree height,
still taken as ultrametric."""

DEFAULT_NEAR_ZERO = 1e-5
"""Share of a tree's height below which a branch is too short to be real
(near zero). One hundred-thousandth of the height is 400 years on a tree
40 million years deep and 1,500 years at 150 million: younger than any
split between species that a dated tree resolves; on a tree in
substitutions per site of height 0.3 it is 3e-6, under one substitution
in any alignment shorter than 300,000 sites. So a branch below it is a
placeholder for zero or a rounding remnant, not an estimate (our
reasoning; no published convention exists)."""

ROUNDING_SPREAD_LIMIT = 0.01
"""Largest spread of root-to-tip distances, as a share of the height, that
rounding of the written lengths may explain whatever their decimals.
Lengths written to three significant digits are each off by at most 0.5%
of themselves, so every root-to-tip path is off by at most 0.5% of its
length, and two tips by at most 1% of the height (our reasoning); a wider
spread is substantive even when so few decimals were written that each
path's rounding allowance could cover it (``((A:10,B:10):5,(C:7,D:7):6);``
spreads 2 on a height of 15)."""

DEFAULT_OUTLIER_THRESHOLD = 3.5
"""Modified z-score above which a branch length is an extreme outlier; 3.5
is the cut-off recommended by Iglewicz and Hoaglin (1993), *How to Detect
and Handle Outliers*, ASQC Quality Press."""

# How a count of trees reads for each code: "37 of 100 trees have polytomies".
FINDING_PHRASES: dict[str, str] = {
    "tree.polytomy": "have polytomies",
    "tree.basal_trifurcation": "have a basal trifurcation",
    "tree.single_child_node": "have nodes with a single child",
    "tree.zero_length_terminal": "have zero-length terminal branches",
    "tree.zero_length_internal": "have zero-length internal branches",
    "tree.negative_length": "have negative branch lengths",
    "tree.no_branch_lengths": "have no branch lengths",
    "tree.missing_branch_lengths": "have some branch lengths missing",
    "tree.not_ultrametric": "are not ultrametric",
    "tree.duplicate_label": "have duplicate tip labels",
    "tree.empty_label": "have tips without labels",
    "tree.label_needs_quotes": "have labels that need quoting",
    "tree.branch_length_outlier": "have extreme branch-length outliers",
    "tree.covariance_not_positive_definite": "have a singular covariance matrix",
}

# Characters that change a label's meaning in unquoted Newick (blanks,
# punctuation, quotes, brackets). Underscores are not among them: labels
# are kept as written, and DendroPy is read with preserve_underscores.
_QUOTE_NEEDED = re.compile(r"[\s(),:;'\[\]]")


_MINIMUM_LOG_MAD = 0.2


def _near_zero_problem(near_zero: float) -> str | None:
    if np.isfinite(near_zero) and 0 <= near_zero < 1:
        return None
    return (
        f"the near-zero share {near_zero!r} is not a number from 0 up to (not including) 1 "
        "(--near-zero: branches shorter than this share of the tree's height count as zero "
        f"length, e.g. {DEFAULT_NEAR_ZERO}; 0 catches exact zeros only)"
    )


def validate_near_zero(near_zero: float) -> None:
    """Raise :class:`InputError` unless ``near_zero`` is a share of the
    height in [0, 1)."""
    problem = _near_zero_problem(near_zero)
    if problem:
        raise InputError(
            problem, field="near zero", hint=f"give a share such as {DEFAULT_NEAR_ZERO}, or 0"
        )


def near_zero_cutoff(height: float, near_zero: float = DEFAULT_NEAR_ZERO) -> float:
    """Return the length below which a branch of a tree of ``height`` is
    near zero: ``near_zero * height`` (0 for a tree of height 0)."""
    return float(near_zero) * max(float(height), 0.0)


def near_zero_branches(
    lengths: np.ndarray, height: float, near_zero: float = DEFAULT_NEAR_ZERO
) -> np.ndarray:
    """Return the mask of branches that are zero or near zero: length exactly
    0, or at least 0 and shorter than ``near_zero`` times the tree's
    ``height`` (its largest root-to-tip distance). Negative and missing
    lengths are not in the mask (they are findings of their own).

    This is the one rule behind the zero-length findings and
    :func:`~curation.trees.edits.zero_tips_lengthened`.
    """
    lengths = np.asarray(lengths, dtype=np.float64)
    cutoff = near_zero_cutoff(height, near_zero)
    return (lengths == 0) | ((lengths >= 0) & (lengths < cutoff))


def validate_check_options(
    tolerance: float, outlier_threshold: float, near_zero: float = DEFAULT_NEAR_ZERO
) -> None:
    """Raise :class:`InputError` listing every unusable check option."""
    problems: list[str] = []
    if not np.isfinite(tolerance) or tolerance < 0:
        problems.append(
            f"the tolerance {tolerance!r} is not a number >= 0 (--tolerance: the largest "
            "spread of root-to-tip distances relative to tree height taken as ultrametric, "
            f"e.g. {DEFAULT_TOLERANCE})"
        )
    if not np.isfinite(outlier_threshold) or outlier_threshold <= 0:
        problems.append(
            f"the outlier threshold {outlier_threshold!r} is not a number > 0 "
            f"(--outlier-threshold, e.g. {DEFAULT_OUTLIER_THRESHOLD})"
        )
    near = _near_zero_problem(near_zero)
    if near:
        problems.append(near)
    if problems:
        first = problems[0]
        raise InputError(
            "; ".join(problems),
            field="tolerance"
            if first.startswith("the tolerance")
            else "outlier threshold"
            if first.startswith("the outlier")
            else "near zero",
            hint="give a tolerance >= 0, an outlier threshold > 0 and a near-zero share "
            "from 0 up to 1",
        )


UltrametricReport = dict[str, Any]
"""The measures behind the ultrametric check, kept in the finding's details:
tips, height, spread, relative_spread, rounding_allowance,
rounding_spread_limit, verdict ('ultrametric', 'rounding-level' or
'substantive'), reason (for a substantive verdict: 'decimals' when the
written decimals cannot explain the spread, 'share' when they could but
the spread is above :data:`ROUNDING_SPREAD_LIMIT` of the height; '' else),
deepest_tip and shallowest_tip."""


def _written_half_units(tree: TreeArrays) -> np.ndarray:
    """Half a unit of the last written decimal place of each branch length:
    the largest rounding error the file can hide in it."""
    if tree.length_decimals is not None:
        places = tree.length_decimals.astype(np.float64)
    else:
        # Not read from text: the shortest repr is the best guess of what
        # was written (a trailing zero would have been lost).
        places = np.asarray(
            [
                float(len(np.format_float_positional(v, trim="-").partition(".")[2]))
                if np.isfinite(v)
                else -1.0
                for v in tree.edge_length
            ]
        )
    half = 0.5 * np.power(10.0, -np.maximum(places, 0.0))
    return np.where(places < 0, 0.0, half)


def measure_ultrametricity(tree: TreeArrays, depths: np.ndarray | None = None) -> UltrametricReport:
    """Measure how far ``tree`` is from ultrametric.

    The spread is the largest minus the smallest root-to-tip distance; the
    height is the largest. The deviation is *rounding-level* when both

    - one common height lies within every tip's rounding allowance (the sum
      along its path of half a unit of the last decimal written for each
      length), that is ``max(d - e) <= min(d + e)``; and
    - the spread is at most :data:`ROUNDING_SPREAD_LIMIT` (1%) of the
      height, so that lengths written with very few decimals (whole
      numbers) cannot pass a real deviation off as rounding;

    otherwise it is *substantive*.

    Returns:
        :class:`UltrametricReport` (verdict 'ultrametric' when the spread is 0).
    """
    if depths is None:
        depths = tree.depths()
    tips = tree.tips
    tip_depths = depths[tips]
    height = float(tip_depths.max()) if len(tips) else 0.0
    low = float(tip_depths.min()) if len(tips) else 0.0
    spread = height - low
    relative = spread / height if height > 0 else 0.0
    report: UltrametricReport = dict(
        tips=len(tips),
        height=height,
        spread=spread,
        relative_spread=relative,
        deepest_tip=tree.labels[int(tips[np.argmax(tip_depths)])] if len(tips) else "",
        shallowest_tip=tree.labels[int(tips[np.argmin(tip_depths)])] if len(tips) else "",
        rounding_spread_limit=ROUNDING_SPREAD_LIMIT,
    )
    if spread == 0:
        report.update(rounding_allowance=0.0, verdict="ultrametric", reason="")
        return report
    allowance = path_sums(tree.parent, _written_half_units(tree))[tips]
    # A little slack for the float arithmetic of summing the lengths.
    slack = 8 * np.finfo(float).eps * max(height, 1.0) * max(1, int(np.log2(len(depths) + 1)))
    consistent = (
        float(np.max(tip_depths - allowance)) <= float(np.min(tip_depths + allowance)) + slack
    )
    small = spread <= ROUNDING_SPREAD_LIMIT * height + slack
    reason = "" if consistent and small else ("decimals" if not consistent else "share")
    report.update(
        rounding_allowance=float(allowance.max()),
        verdict="substantive" if reason else "rounding-level",
        reason=reason,
    )
    return report


def ultrametric_explanation(report: UltrametricReport) -> str:
    """Return why a deviation got its verdict, in words for a person."""
    if report["verdict"] == "rounding-level":
        return "within what the decimals written in the file can explain"
    if report["verdict"] == "ultrametric":
        return "every tip is at the same distance from the root"
    if report.get("reason") == "share":
        return (
            "the lengths are written with too few decimals to tell rounding from a real "
            "difference, but rounding does not spread the tips by more than "
            f"{report['rounding_spread_limit']:g} of the height (fossil tips, or a tree not "
            "scaled to time?)"
        )
    return (
        "more than rounding of the written lengths explains (fossil tips, or a tree not "
        "scaled to time?)"
    )


def _node_finding(
    code: str,
    severity: Severity,
    names: NodeNames,
    node: int,
    message: str,
    **details: Any,
) -> Finding:
    first, second = names.tips_of(node)
    subject = names.subject(node)
    base = {"tips": [first, second], "tip_count": int(names.tip_count[node])}
    base.update(details)
    return Finding(code=code, severity=severity, subject=subject, message=message, details=base)


def _length_findings(
    tree: TreeArrays,
    names: NodeNames,
    threshold: float,
    near_zero: float = DEFAULT_NEAR_ZERO,
    depths: np.ndarray | None = None,
) -> list[Finding]:
    findings: list[Finding] = []
    lengths = tree.edge_length
    n = tree.node_count
    non_root = np.arange(n) > 0
    is_tip = tree.is_tip
    missing = np.isnan(lengths) & non_root
    if n > 1 and missing[1:].all():
        return [
            Finding(
                code="tree.no_branch_lengths",
                severity=Severity.error,
                subject="tree",
                message="the tree has no branch lengths; comparative methods need them",
                details={"branches": n - 1},
            )
        ]
    if missing.any():
        where = np.flatnonzero(missing)
        findings.append(
            Finding(
                code="tree.missing_branch_lengths",
                severity=Severity.error,
                subject="tree",
                message=f"{len(where)} of {n - 1} branches have no length",
                details={
                    "missing": len(where),
                    "branches": n - 1,
                    "first_missing": names.subjects(where[:20]),
                },
            )
        )
    for node in np.flatnonzero(lengths < 0):
        findings.append(
            _node_finding(
                "tree.negative_length",
                Severity.error,
                names,
                int(node),
                f"the branch above {names.subject(int(node))} has a negative length "
                f"{float(lengths[node])!r}",
                length=float(lengths[node]),
            )
        )
    if depths is None:
        depths = tree.depths()
    height = float(depths[tree.tips].max()) if n > 1 else 0.0
    cutoff = near_zero_cutoff(height, near_zero)
    zero = near_zero_branches(lengths, height, near_zero) & non_root

    def how_short(node: int) -> tuple[str, dict[str, Any]]:
        length = float(lengths[node])
        details = {"length": length, "near_zero": near_zero, "cutoff": cutoff, "height": height}
        if length == 0:
            return "has length 0", details
        return (
            f"is {length:.3g} long, shorter than {near_zero:g} of the tree's height "
            f"{height:.6g} ({cutoff:.3g}): too short to be real",
            details,
        )

    for node in np.flatnonzero(zero & is_tip):
        words, details = how_short(int(node))
        findings.append(
            _node_finding(
                "tree.zero_length_terminal",
                Severity.warning,
                names,
                int(node),
                f"the terminal branch of {tree.labels[node]!r} {words}",
                **details,
            )
        )
    for node in np.flatnonzero(zero & ~is_tip):
        words, details = how_short(int(node))
        findings.append(
            _node_finding(
                "tree.zero_length_internal",
                Severity.info,
                names,
                int(node),
                f"the internal branch above {names.subject(int(node))} {words}",
                **details,
            )
        )
    findings.extend(_outlier_findings(tree, names, threshold))
    return findings


def _outlier_findings(tree: TreeArrays, names: NodeNames, threshold: float) -> list[Finding]:
    """Branches whose log length has a modified z-score above ``threshold``
    (Iglewicz and Hoaglin 1993: z = 0.6745 (x - median) / MAD). Only long
    branches count: very short ones are common in real radiations, while a
    branch hundreds of times the typical length is usually a unit or typing
    slip. On a log scale the test is the same for trees in years or in Ma."""
    lengths = tree.edge_length.copy()
    lengths[0] = np.nan
    usable = np.flatnonzero(np.isfinite(lengths) & (lengths > 0))
    if len(usable) < 8:  # too few branches to say what is typical
        return []
    logs = np.log10(lengths[usable])
    median = float(np.median(logs))
    # A floor on the spread: when most lengths are equal (MAD 0) any other
    # length would otherwise be "extreme"; 0.2 in log10 units means a
    # branch must be over 10 times the median before 3.5 can be exceeded.
    mad = max(float(np.median(np.abs(logs - median))), _MINIMUM_LOG_MAD)
    z = 0.6745 * (logs - median) / mad
    typical = 10**median
    out: list[Finding] = []
    for k in np.flatnonzero(z > threshold):
        node = int(usable[k])
        out.append(
            _node_finding(
                "tree.branch_length_outlier",
                Severity.warning,
                names,
                node,
                f"the branch above {names.subject(node)} is {lengths[node]:.6g}, "
                f"{lengths[node] / typical:.3g} times the median branch length {typical:.6g}",
                length=float(lengths[node]),
                median_length=typical,
                modified_z=float(z[k]),
                threshold=threshold,
            )
        )
    return out


def _label_findings(tree: TreeArrays) -> list[Finding]:
    findings: list[Finding] = []
    labels = pd.Series([tree.labels[i] for i in tree.tips], dtype=object)
    empty = np.flatnonzero((labels == "").to_numpy())
    if len(empty):
        findings.append(
            Finding(
                code="tree.empty_label",
                severity=Severity.error,
                subject="tips without labels",
                message=f"{len(empty)} tips have no label",
                details={"count": len(empty), "positions": empty[:50].tolist()},
            )
        )
    named = labels[labels != ""]
    repeated = named[named.duplicated(keep=False)]
    for label, where in sorted(repeated.groupby(repeated, sort=False).groups.items()):
        positions = [int(p) for p in where]
        findings.append(
            Finding(
                code="tree.duplicate_label",
                severity=Severity.error,
                subject=f"tip {label!r}",
                message=f"the tip label {label!r} is on {len(positions)} tips "
                f"(positions {', '.join(map(str, positions[:10]))} in the tree)",
                details={"label": label, "count": len(positions), "positions": positions},
            )
        )
    quoted = named[named.str.contains(_QUOTE_NEEDED, regex=True)].drop_duplicates()
    for label in sorted(quoted):
        findings.append(
            Finding(
                code="tree.label_needs_quotes",
                severity=Severity.info,
                subject=f"tip {label!r}",
                message=f"the label {label!r} survives a Newick round trip only when "
                "quoted (blanks, punctuation, quotes or brackets change its meaning "
                "unquoted); tipledger quotes it on writing, other programs may not",
                details={"label": label},
            )
        )
    return findings


def _shape_findings(tree: TreeArrays, names: NodeNames, meant_rooted: bool) -> list[Finding]:
    findings: list[Finding] = []
    counts = tree.child_count
    for node in np.flatnonzero(counts > 2):
        node = int(node)
        k = int(counts[node])
        if node == 0 and k == 3:
            if not meant_rooted:
                continue  # the usual way an unrooted tree is written
            findings.append(
                _node_finding(
                    "tree.basal_trifurcation",
                    Severity.warning,
                    names,
                    node,
                    "the root has three children although the tree is meant to be rooted "
                    "(it may be an unrooted tree written as rooted)",
                    children=k,
                )
            )
            continue
        findings.append(
            _node_finding(
                "tree.polytomy",
                Severity.warning,
                names,
                node,
                f"{names.subject(node)} has {k} children",
                children=k,
            )
        )
    for node in np.flatnonzero(counts == 1):
        findings.append(
            _node_finding(
                "tree.single_child_node",
                Severity.warning,
                names,
                int(node),
                f"{names.subject(int(node))} has a single child",
            )
        )
    return findings


def check_tree(
    tree: TreeArrays,
    *,
    tolerance: float = DEFAULT_TOLERANCE,
    outlier_threshold: float = DEFAULT_OUTLIER_THRESHOLD,
    near_zero: float = DEFAULT_NEAR_ZERO,
    expect_rooted: bool | None = None,
    matrix: bool = False,
    memory_limit_bytes: int | None = None,
) -> list[Finding]:
    """Run every check on one tree and return its findings.

    Args:
        tolerance: largest spread of root-to-tip distances, relative to the
            tree's height, still taken as ultrametric (>= 0).
        outlier_threshold: modified z-score of a log branch length above
            which the branch is an extreme outlier (> 0).
        near_zero: share of the tree's height below which a branch counts
            as zero length (0 <= share < 1; 0: exact zeros only; see
            :func:`near_zero_branches`).
        expect_rooted: whether the tree is meant to be rooted; ``None``
            takes the file's [&R]/[&U] and, when the file is silent, rooted
            (comparative methods need a rooted tree).
        matrix: also check the phylogenetic variance-covariance matrix
            (builds an n x n matrix; see :func:`curation.trees.matrix.check_covariance`).
        memory_limit_bytes: refuse the matrix above this size.

    Returns:
        Findings in a stable order: shape, lengths, ultrametricity, labels.

    Raises:
        InputError: a negative tolerance, a non-positive outlier threshold or
            a near-zero share outside [0, 1); with ``matrix``, a matrix above
            the memory limit.
    """
    validate_check_options(tolerance, outlier_threshold, near_zero)
    names = name_nodes(tree)
    meant_rooted = expect_rooted if expect_rooted is not None else tree.rooted is not False
    findings = _shape_findings(tree, names, meant_rooted)
    depths = tree.depths()
    length_findings = _length_findings(tree, names, outlier_threshold, near_zero, depths)
    findings.extend(length_findings)
    lengths_usable = not any(
        f.code in ("tree.no_branch_lengths", "tree.missing_branch_lengths") for f in length_findings
    )
    if lengths_usable and len(tree.tips) > 1:
        report = measure_ultrametricity(tree, depths)
        if report["relative_spread"] > tolerance:
            verdict = report["verdict"]
            why = ultrametric_explanation(report)
            findings.append(
                Finding(
                    code="tree.not_ultrametric",
                    severity=Severity.warning,
                    subject="tree",
                    message=f"root-to-tip distances spread by {report['spread']:.6g} "
                    f"({report['relative_spread']:.3g} of the height {report['height']:.6g}), "
                    f"above the tolerance {tolerance:g}: {verdict}, {why}",
                    details={**report, "tolerance": tolerance},
                )
            )
    findings.extend(_label_findings(tree))
    if matrix and lengths_usable:
        from curation.trees.matrix import check_covariance

        findings.extend(check_covariance(tree, memory_limit_bytes=memory_limit_bytes))
    return findings


class TreeCheckReport(BaseModel):
    """What :func:`check_trees` found and stored.

    Attributes:
        tree_set_id: the set checked.
        tree_ids: the trees checked, in file order.
        event_id: the ledger event the findings are stored under.
        counts: for each finding code, how many trees show it.
        sentences: the counts for a person: "37 of 100 trees have polytomies".
        findings: the stored findings: one per code and subject, its details
            saying in how many trees (and which, by index in the file) it
            appears; plus, for a set, tips not shared by all trees and one
            ``tree.frequency`` finding per code.
    """

    tree_set_id: int
    tree_ids: list[int]
    event_id: int
    counts: dict[str, int]
    sentences: list[str]
    findings: list[Finding]

    def frame(self) -> pd.DataFrame:
        """Return the findings as a DataFrame (see :func:`curation.findings.findings_frame`)."""
        return findings_frame(self.findings)


def _set_findings(
    per_tree: list[tuple[Tree, TreeArrays, list[Finding]]],
) -> tuple[list[Finding], dict[str, int], list[str]]:
    total = len(per_tree)
    grouped: dict[tuple[str, str], tuple[Finding, list[int]]] = {}
    counts: dict[str, int] = {}
    for tree, _arrays, findings in per_tree:
        seen: set[str] = set()
        for finding in findings:
            key = (finding.code, finding.subject)
            if key in grouped:
                grouped[key][1].append(tree.index_in_file)
            else:
                grouped[key] = (finding, [tree.index_in_file])
            seen.add(finding.code)
        for code in seen:
            counts[code] = counts.get(code, 0) + 1
    out: list[Finding] = []
    for (_code, _subject), (finding, indices) in grouped.items():
        if total == 1:
            details = {**finding.details, "tree_id": per_tree[0][0].id}
            out.append(finding.model_copy(update={"details": details}))
            continue
        details = {
            **finding.details,
            "trees_with": len(indices),
            "trees": total,
            "tree_indices": indices[:100],
        }
        message = f"{finding.message} (in {len(indices)} of {total} trees)"
        out.append(finding.model_copy(update={"details": details, "message": message}))
    sentences = [
        f"{counts[code]} of {total} trees {FINDING_PHRASES.get(code, 'show ' + code)}"
        for code in sorted(counts)
    ]
    if total > 1:
        tip_sets = [set(arrays.tip_labels) for _tree, arrays, _f in per_tree]
        everywhere = set.intersection(*tip_sets)
        union = set.union(*tip_sets)
        for label in sorted(union - everywhere):
            having = sum(label in tips for tips in tip_sets)
            out.append(
                Finding(
                    code="tree.tips_not_shared",
                    severity=Severity.warning,
                    subject=f"tip {label!r}",
                    message=f"the tip {label!r} is in {having} of the {total} trees",
                    details={"label": label, "trees_with": having, "trees": total},
                )
            )
        if union != everywhere:
            counts["tree.tips_not_shared"] = sum(1 for tips in tip_sets if tips != union)
            sentences.append(f"{len(union - everywhere)} tips are not in all {total} trees")
        for code in sorted(c for c in counts if c in FINDING_PHRASES):
            out.append(
                Finding(
                    code="tree.frequency",
                    severity=Severity.info,
                    subject=code,
                    message=f"{counts[code]} of {total} trees {FINDING_PHRASES[code]}",
                    details={"code": code, "trees_with": counts[code], "trees": total},
                )
            )
    return out, counts, sentences


def check_trees(
    store: Store,
    tree_set_id: int | None = None,
    *,
    tree_id: int | None = None,
    tolerance: float = DEFAULT_TOLERANCE,
    outlier_threshold: float = DEFAULT_OUTLIER_THRESHOLD,
    near_zero: float = DEFAULT_NEAR_ZERO,
    expect_rooted: bool | None = None,
    matrix: bool = False,
    memory_limit_bytes: int | None = None,
    who: str | None = None,
) -> TreeCheckReport:
    """Check every tree of a stored tree set (or one tree) and store the
    findings under one ledger event ``check-trees``.

    Options are those of :func:`check_tree`.

    Returns:
        :class:`TreeCheckReport`.

    Raises:
        NotFoundError: no such tree set or tree (nothing is stored).
        InputError: a negative tolerance, a non-positive outlier threshold,
            a near-zero share outside [0, 1), neither or both of
            ``tree_set_id`` and ``tree_id``; with ``matrix``, a matrix above
            the memory limit (nothing is stored).
    """
    validate_check_options(tolerance, outlier_threshold, near_zero)
    if (tree_set_id is None) == (tree_id is None):
        raise InputError(
            "give either a tree set or one tree to check",
            field="tree set",
            hint="name a tree set (e.g. `check-trees 1`) or one tree with --tree",
        )
    with store.transaction() as session:
        if tree_id is not None:
            tree, arrays = load_tree(session, tree_id)
            loaded = [(tree, arrays)]
            set_id = tree.tree_set_id
            subject = f"tree {tree_id}"
        else:
            assert tree_set_id is not None
            loaded = load_tree_set(session, tree_set_id)
            set_id = tree_set_id
            subject = f"tree set {tree_set_id}"
        per_tree = [
            (
                tree,
                arrays,
                check_tree(
                    arrays,
                    tolerance=tolerance,
                    outlier_threshold=outlier_threshold,
                    near_zero=near_zero,
                    expect_rooted=expect_rooted if expect_rooted is not None else tree.rooted,
                    matrix=matrix,
                    memory_limit_bytes=memory_limit_bytes,
                ),
            )
            for tree, arrays in loaded
        ]
        findings, counts, sentences = _set_findings(per_tree)
        summary = f"checked {len(loaded)} trees" + (
            ": " + "; ".join(sentences) if sentences else ": no findings"
        )
        event = record_event(
            session,
            "check-trees",
            subject=subject,
            summary=summary,
            parameters={
                "tree_set_id": set_id,
                "tree_id": tree_id,
                "tolerance": tolerance,
                "outlier_threshold": outlier_threshold,
                "near_zero": near_zero,
                "expect_rooted": expect_rooted,
                "matrix": matrix,
                "memory_limit_bytes": memory_limit_bytes,
                "trees": len(loaded),
                "counts": counts,
            },
            who=who,
        )
        record_findings(session, event, findings)
        return TreeCheckReport(
            tree_set_id=set_id,
            tree_ids=[tree.id for tree, _ in loaded],
            event_id=event.id,
            counts=counts,
            sentences=sentences,
            findings=findings,
        )


def tree_findings(
    store: Store, tree_set_id: int | None = None, *, tree_id: int | None = None
) -> pd.DataFrame:
    """Return the findings of the latest ``check-trees`` of a tree set (or
    of one tree) as a DataFrame (code, severity, subject, message, details),
    sorted by code and subject; empty when it was never checked.

    Raises:
        NotFoundError: no such tree set or tree.
    """
    with store.reading() as session:
        if tree_id is not None:
            load_tree(session, tree_id)
            subject = f"tree {tree_id}"
        else:
            if tree_set_id is None:
                raise InputError("give a tree set or one tree with --tree", field="tree set")
            get_tree_set(session, tree_set_id)
            subject = f"tree set {tree_set_id}"
        event_id = session.scalar(
            select(LedgerEvent.id)
            .where(LedgerEvent.action == "check-trees", LedgerEvent.subject == subject)
            .order_by(LedgerEvent.id.desc())
            .limit(1)
        )
        if event_id is None:
            return findings_frame([])
        rows = session.scalars(select(StoredFinding).where(StoredFinding.event_id == event_id))
        return findings_frame(
            [
                Finding(
                    code=r.code,
                    severity=Severity(r.severity),
                    subject=r.subject,
                    message=r.message,
                    details=r.details or {},
                )
                for r in rows
            ]
        )
