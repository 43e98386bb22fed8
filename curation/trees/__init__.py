"""Trees: the array view, stable node names, checks, the covariance
matrix, pure edits and recorded repairs."""

from curation.trees.arrays import TreeArrays, from_dendropy, parse_newick, to_newick
from curation.trees.checks import TreeCheckReport, check_tree, check_trees, tree_findings
from curation.trees.edits import (
    children_sorted,
    made_ultrametric,
    polytomies_resolved,
    pruned,
    short_branches_collapsed,
    zero_tips_lengthened,
)
from curation.trees.matrix import check_covariance, covariance_matrix, covariance_report
from curation.trees.nodes import NodeNames, name_nodes
from curation.trees.repairs import (
    RepairReport,
    collapse_short_branches,
    lengthen_zero_tips,
    make_ultrametric,
    prune_trees,
    resolve_polytomies,
    sort_children,
)

__all__ = [
    "RepairReport",
    "NodeNames",
    "TreeArrays",
    "TreeCheckReport",
    "check_covariance",
    "check_tree",
    "check_trees",
    "children_sorted",
    "collapse_short_branches",
    "covariance_matrix",
    "covariance_report",
    "from_dendropy",
    "lengthen_zero_tips",
    "made_ultrametric",
    "make_ultrametric",
    "name_nodes",
    "parse_newick",
    "polytomies_resolved",
    "prune_trees",
    "pruned",
    "resolve_polytomies",
    "short_branches_collapsed",
    "sort_children",
    "to_newick",
    "tree_findings",
    "zero_tips_lengthened",
]
