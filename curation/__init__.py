"""tipledger: reconcile phylogenies and trait tables into analysis-ready,
fully traceable bundles.

The import name is ``curation``; each stage of the data flow has a
subpackage (``store``, ``imports``, ``names``, ``trees``, ``traits``,
``bundle``) with a documented Python API.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
