"""Bundles: the analysis-ready folder with provenance, its report, and
verifying it afterwards."""

from curation.bundle.export import BundleResult, make_bundle
from curation.bundle.inputs import BundleInputs, BundleOptions, gather_bundle_inputs
from curation.bundle.verify import VerifyReport, verify_bundle

__all__ = [
    "BundleInputs",
    "BundleOptions",
    "BundleResult",
    "VerifyReport",
    "gather_bundle_inputs",
    "make_bundle",
    "verify_bundle",
]
