"""Whether one contrast, and so one or two tips, dominates a trait's
diagnostics.

Under Brownian motion the standardised independent contrasts (Felsenstein
1985) are independent normal variables with one variance, the rate, and
their squares add up to the quadratic form r'V^-1 r. The REML rate is that
sum over n - 1, and Blomberg's K is inversely proportional to it
(Blomberg, Garland and Ives 2003: K = (MSE0 / MSE) / E[MSE0 / MSE] with
MSE = r'V^-1 r / (n - 1)). So when one contrast carries most of the sum,
the rate, the phylogenetic standard error and K are mostly that contrast.
A pair of sister tips on near-zero terminal branches whose values differ
(by measurement noise, say) gives exactly such a contrast: its standard
deviation is tiny, so the contrast is huge.

The check is linear in the tips: the contrasts come from the same pass
the branch-length check uses, and only when one dominates are the figures
recomputed with its tips left out (a few more linear passes).

A contrast *dominates* when both

- its square is at least :data:`DOMINANT_SHARE` (half) of the sum, so it
  carries as much as all the others together: without it the rate would
  at least halve and K at least double (our reasoning, from the formulas
  above); and
- so large a share is improbable under Brownian motion: with m contrasts,
  c_i^2 / (mean square of the others) follows an F(1, m - 1) distribution,
  and the largest of m is judged by m * P(F > f) (the Bonferroni bound,
  common practice for the largest of several tests; exact here, since only
  one contrast can carry half the sum) against 0.01. This keeps a tree of
  a handful of species, where one contrast in three often carries half
  the sum by chance, from being called dominated; the level is stricter
  than the 0.05 of the statistics themselves because the sentence then
  asks the user to check the data (our choice).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from pydantic import BaseModel
from scipy.stats import f as f_distribution

from curation.diagnostics.contrasts import AdequacyCheck, ContrastTable, adequacy_of
from curation.diagnostics.fits import fit_lambda
from curation.diagnostics.pruning import PreparedTree, prepare_tree
from curation.diagnostics.signal import blomberg_k
from curation.trees.arrays import TreeArrays, path_sums
from curation.trees.checks import DEFAULT_NEAR_ZERO, near_zero_branches

__all__ = ["DOMINANT_SHARE", "Dominance", "find_dominance"]

DOMINANT_SHARE = 0.5
_SIGNIFICANCE = 0.01
_MINIMUM_CONTRASTS = 3


class Dominance(BaseModel):
    """One standardised contrast that carries most of a trait's Brownian
    rate, and what the figures are without it.

    Attributes:
        share: its squared contrast over the sum of all squared contrasts.
        p_value: Bonferroni-bounded chance that the largest of the
            contrasts carries that share under Brownian motion.
        contrasts: how many contrasts there are.
        sides: the tips on each side of the contrast (listed when a side
            has at most two tips, else its first and last tip).
        side_sizes: how many tips each side has.
        tips: the tips that are a side on their own (one or two): the tips
            that dominate.
        terminal_lengths: the terminal branch length of each of ``tips``
            (in the tree as the diagnostics use it).
        near_zero: whether each of ``tips`` is on a near-zero terminal
            branch by the trees' rule (shorter than ``near_zero_share`` of
            the tree's height, :func:`curation.trees.checks.near_zero_branches`).
        near_zero_share: that share.
        height: the tree's height.
        left_out: the tips left out, one at a time, for the figures below.
        k_without: Blomberg's K with each of ``left_out`` left out.
        lambda_without: Pagel's lambda with each of ``left_out`` left out.
        adequacy_without: the branch-length check without this contrast.
    """

    share: float
    p_value: float
    contrasts: int
    sides: list[list[str]]
    side_sizes: list[int]
    tips: list[str]
    terminal_lengths: list[float]
    near_zero: list[bool]
    near_zero_share: float
    height: float
    left_out: list[str]
    k_without: list[float]
    lambda_without: list[float]
    adequacy_without: AdequacyCheck | None = None


def _tips_below(tree: PreparedTree, nodes: np.ndarray) -> list[int]:
    """Positions (in ``tree.labels`` order) of the tips below ``nodes``."""
    mark = np.zeros(tree.node_count)
    mark[nodes] = 1.0
    below = path_sums(tree.parent, mark) > 0
    return np.flatnonzero(below[tree.tip_nodes]).tolist()


def _named(tree: PreparedTree, positions: list[int]) -> list[str]:
    names = sorted(tree.labels[i] for i in positions)
    return names if len(names) <= 2 else [names[0], names[-1]]


def find_dominance(
    arrays: TreeArrays,
    tree: PreparedTree,
    y: np.ndarray,
    table: ContrastTable,
    *,
    near_zero: float = DEFAULT_NEAR_ZERO,
) -> Dominance | None:
    """Return the :class:`Dominance` of the largest contrast of ``y`` on
    ``tree`` (prepared from ``arrays``, values in ``tree.labels`` order), or
    ``None`` when no contrast dominates (see the module's rule).

    ``table`` holds the contrasts (:func:`~curation.diagnostics.contrasts.contrast_table`
    on the tree's own branch lengths). When a side of the dominant contrast
    is a single tip, Blomberg's K (Blomberg, Garland and Ives 2003) and
    Pagel's lambda (Pagel 1999) are recomputed with that tip left out,
    each such tip in turn.
    """
    squares = table.contrast**2
    m = len(squares)
    total = float(squares.sum())
    if m < _MINIMUM_CONTRASTS or not np.isfinite(total) or total <= 0:
        return None
    row = int(np.argmax(squares))
    share = float(squares[row] / total)
    if share < DOMINANT_SHARE:
        return None
    rest = max(1.0 - share, np.finfo(float).tiny)
    ratio = (m - 1) * share / rest
    p_value = float(min(1.0, m * f_distribution.sf(ratio, 1, m - 1)))
    if p_value >= _SIGNIFICANCE:
        return None
    sides = [
        _tips_below(tree, table.earlier(row)),
        _tips_below(tree, np.asarray([table.child[row]])),
    ]
    singles = sorted(tree.labels[side[0]] for side in sides if len(side) == 1)
    position = {label: i for i, label in enumerate(tree.labels)}
    height = tree.height
    lengths = [float(tree.length[tree.tip_nodes[position[t]]]) for t in singles]
    short = near_zero_branches(np.asarray(lengths), height, near_zero) if lengths else []
    k_without: list[float] = []
    lambda_without: list[float] = []
    if len(tree.labels) - 1 >= 3:
        for tip in singles:
            keep = [label for label in tree.labels if label != tip]
            values = pd.Series(y, index=tree.labels).reindex(keep).to_numpy(dtype=float)
            smaller = prepare_tree(arrays, keep)
            k_without.append(blomberg_k(smaller, values, permutations=0).k)
            lambda_without.append(fit_lambda(smaller, values).lam)
    keep_rows = np.arange(m) != row
    return Dominance(
        share=share,
        p_value=p_value,
        contrasts=m,
        sides=[_named(tree, side) for side in sides],
        side_sizes=[len(side) for side in sides],
        tips=singles,
        terminal_lengths=lengths,
        near_zero=[bool(v) for v in short],
        near_zero_share=near_zero,
        height=height,
        left_out=singles if k_without else [],
        k_without=k_without,
        lambda_without=lambda_without,
        adequacy_without=adequacy_of(table.contrast[keep_rows], table.sd[keep_rows]),
    )
