"""Phylogenetic readiness diagnostics per trait, in linear time.

:func:`trait_diagnostics` (one trait on a tree's array view) and
:func:`diagnose_traits` (every continuous trait of the species values on a
stored tree). The computations run through one postorder pruning pass
(:mod:`curation.diagnostics.likelihood`); :mod:`curation.diagnostics.dense`
is the dense reference used only by the tests.
"""

from curation.diagnostics.contrasts import (
    AdequacyCheck,
    check_branch_lengths,
    standardised_contrasts,
)
from curation.diagnostics.diagnose import (
    MeasurementErrorDiagnostics,
    TraitDiagnostics,
    diagnose_traits,
    diagnostics_frame,
    trait_diagnostics,
)
from curation.diagnostics.fits import BrownianFit, LambdaFit, fit_brownian, fit_lambda
from curation.diagnostics.influence import Dominance, find_dominance
from curation.diagnostics.likelihood import BrownianPass, edge_variances
from curation.diagnostics.pruning import PreparedTree, prepare_tree
from curation.diagnostics.signal import SignalK, blomberg_k

__all__ = [
    "AdequacyCheck",
    "BrownianFit",
    "BrownianPass",
    "Dominance",
    "LambdaFit",
    "MeasurementErrorDiagnostics",
    "PreparedTree",
    "SignalK",
    "TraitDiagnostics",
    "blomberg_k",
    "check_branch_lengths",
    "diagnose_traits",
    "diagnostics_frame",
    "edge_variances",
    "find_dominance",
    "fit_brownian",
    "fit_lambda",
    "prepare_tree",
    "standardised_contrasts",
    "trait_diagnostics",
]
