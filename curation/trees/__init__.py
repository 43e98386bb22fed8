"""Trees: the array view, checks, repairs and pruning."""

from curation.trees.arrays import TreeArrays, from_dendropy, parse_newick, to_newick

__all__ = ["TreeArrays", "from_dendropy", "parse_newick", "to_newick"]
