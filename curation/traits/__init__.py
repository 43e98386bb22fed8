"""Trait curation: definitions, unit conversion, fault flags, species
values and the source audit."""

from curation.traits.audit import SourceAudit, audit_sources
from curation.traits.definitions import DefineResult, define_traits, trait_definitions
from curation.traits.faults import EXCLUDING, FAULT_KINDS, FaultOptions, find_faults
from curation.traits.frame import measurements_frame, prepare_frame
from curation.traits.review import (
    FaultReport,
    ReviewResult,
    exclude_measurements,
    flag_measurements,
    include_measurements,
)
from curation.traits.species import POLICIES, aggregate_species, species_values
from curation.traits.units import convert_values

__all__ = [
    "EXCLUDING",
    "FAULT_KINDS",
    "POLICIES",
    "DefineResult",
    "FaultOptions",
    "FaultReport",
    "ReviewResult",
    "SourceAudit",
    "aggregate_species",
    "audit_sources",
    "convert_values",
    "define_traits",
    "exclude_measurements",
    "find_faults",
    "flag_measurements",
    "include_measurements",
    "measurements_frame",
    "prepare_frame",
    "species_values",
    "trait_definitions",
]
