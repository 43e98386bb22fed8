"""Phylogenetic readiness diagnostics per trait, in linear time."""
