"""Standardised independent contrasts (Felsenstein 1985) and the check of
branch-length adequacy of Garland, Harvey and Ives (1992).

A node with k children gives k - 1 contrasts: its children are combined one
at a time as if the polytomy were resolved with zero-length branches
(Pagel 1992), so the squared contrasts always add up to r'C^-1 r. A child
of zero variance (a tip on a zero-length branch) is combined last.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from pydantic import BaseModel
from scipy.stats import pearsonr

from curation.diagnostics.likelihood import BrownianPass, edge_variances
from curation.diagnostics.pruning import PreparedTree

__all__ = [
    "AdequacyCheck",
    "ContrastTable",
    "adequacy_of",
    "check_branch_lengths",
    "contrast_table",
    "standardised_contrasts",
]

# Polytomies up to this size are combined rank by rank (vectorised over all
# nodes); larger ones one node at a time, each with its own cumulative sum.
_SMALL = 8


class AdequacyCheck(BaseModel):
    """Correlation of absolute standardised contrasts with their standard
    deviations (Garland, Harvey and Ives 1992); a clear positive or
    negative correlation means the branch lengths do not standardise the
    contrasts (consider transforming them)."""

    contrasts: int
    correlation: float | None
    p_value: float | None
    note: str | None = None


@dataclass(frozen=True)
class ContrastTable:
    """Every standardised contrast of one set of values, with where it is.

    Attributes:
        contrast: the standardised contrasts.
        sd: their standard deviations.
        group: the contracted node of each contrast (as
            :func:`standardised_contrasts` returns it).
        parent: the prepared tree's node of each contrast.
        child: the prepared tree's node of the child combined in each
            contrast (for a pinned node's virtual child, its tip).
        earlier: for each contrast, the prepared tree's nodes of the
            children combined before it at the same node (one for a
            dichotomy).
    """

    contrast: np.ndarray
    sd: np.ndarray
    group: np.ndarray
    parent: np.ndarray
    child: np.ndarray
    _sorted_child: np.ndarray
    _first: np.ndarray
    _position: np.ndarray

    def earlier(self, row: int) -> np.ndarray:
        """The prepared tree's nodes of the children combined before
        contrast ``row`` at its node."""
        position = int(self._position[row])
        return self._sorted_child[int(self._first[row]) : position]


def contrast_table(bp: BrownianPass, y: np.ndarray) -> ContrastTable:
    """Return every standardised contrast of the values ``y`` under the
    branch variances of ``bp``, with the nodes it compares.

    Each contrast is (combined value so far - next child's value) / sd with
    sd = sqrt(1 / W_so_far + s_child^2).
    """
    par, x, s2 = bp.contrast_parts(y)
    parent_node, child_node = bp.contrast_nodes()
    last = s2 == 0
    order = np.lexsort((np.arange(len(par)), last, par))
    par, x, s2 = par[order], x[order], s2[order]
    parent_node, child_node = parent_node[order], child_node[order]
    w = np.where(s2 > 0, 1.0 / np.where(s2 > 0, s2, 1.0), 0.0)
    starts = np.flatnonzero(np.r_[True, par[1:] != par[:-1]])
    sizes = np.diff(np.r_[starts, len(par)])
    rank = np.arange(len(par)) - np.repeat(starts, sizes)
    group_size = np.repeat(sizes, sizes)
    w_before = np.zeros(len(par))
    wx_before = np.zeros(len(par))
    small = group_size <= _SMALL
    # Rank by rank for small groups: row r's "before" = row r-1's before
    # plus row r-1 itself.
    for r in range(1, min(_SMALL, int(sizes.max()))):
        rows = np.flatnonzero(small & (rank == r))
        w_before[rows] = w_before[rows - 1] + w[rows - 1]
        wx_before[rows] = wx_before[rows - 1] + w[rows - 1] * x[rows - 1]
    for start, size in zip(starts[sizes > _SMALL], sizes[sizes > _SMALL], strict=True):
        part = slice(start, start + size)
        cw = np.cumsum(w[part])
        cwx = np.cumsum(w[part] * x[part])
        w_before[start + 1 : start + size] = cw[:-1]
        wx_before[start + 1 : start + size] = cwx[:-1]
    rows = np.flatnonzero(rank > 0)
    combined = wx_before[rows] / w_before[rows]
    sd = np.sqrt(1.0 / w_before[rows] + s2[rows])
    return ContrastTable(
        contrast=(combined - x[rows]) / sd,
        sd=sd,
        group=par[rows],
        parent=parent_node[rows],
        child=child_node[rows],
        _sorted_child=child_node,
        _first=rows - rank[rows],
        _position=rows,
    )


def standardised_contrasts(
    bp: BrownianPass, y: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (contrast, standard deviation, node) for every contrast of
    the values ``y`` under the branch variances of ``bp`` (see
    :func:`contrast_table`)."""
    table = contrast_table(bp, y)
    return table.contrast, table.sd, table.group


def adequacy_of(contrast: np.ndarray, sd: np.ndarray) -> AdequacyCheck:
    """Garland, Harvey and Ives (1992) on given contrasts: Pearson
    correlation of |contrast| with its standard deviation and its
    two-sided p-value (see :func:`check_branch_lengths`)."""
    size = len(contrast)
    magnitude = np.abs(contrast)
    if size < 3:
        return AdequacyCheck(
            contrasts=size, correlation=None, p_value=None, note="fewer than three contrasts"
        )
    if np.ptp(sd) <= 1e-12 * sd.max():
        return AdequacyCheck(
            contrasts=size,
            correlation=None,
            p_value=None,
            note="every contrast has the same standard deviation, so there is nothing to check",
        )
    if np.ptp(magnitude) == 0:
        return AdequacyCheck(
            contrasts=size, correlation=None, p_value=None, note="every contrast is equal"
        )
    result = pearsonr(magnitude, sd)
    return AdequacyCheck(
        contrasts=size, correlation=float(result.statistic), p_value=float(result.pvalue)
    )


def check_branch_lengths(tree: PreparedTree, y: np.ndarray) -> AdequacyCheck:
    """Garland, Harvey and Ives (1992): Pearson correlation of |standardised
    contrast| with its standard deviation, on the tree's own branch
    lengths, with its two-sided p-value.

    Returns an :class:`AdequacyCheck` whose correlation is ``None`` (with a
    note saying why) when fewer than three contrasts exist or either
    variable is constant.
    """
    table = contrast_table(BrownianPass(tree, edge_variances(tree)), y)
    return adequacy_of(table.contrast, table.sd)
