"""The invented demo scenario, the demo pipeline, and every other piece of
invented data the project uses.

:func:`generate_scenario` writes the sample files and their ground truth;
:func:`run_demo` builds a store from the samples and runs every stage.
Invented names come from :mod:`curation.demo.naming`, invented trees (and
traits evolved on them) from :mod:`curation.demo.phylogeny`, benchmark
measurement tables from :mod:`curation.demo.benchmark_data`; tests and
benchmarks import them from there.
"""

from curation.demo.generator import DEFAULT_SEED, ScenarioFiles, generate_scenario, scenario_files
from curation.demo.pipeline import DemoReport, StepResult, run_demo

__all__ = [
    "DEFAULT_SEED",
    "DemoReport",
    "ScenarioFiles",
    "StepResult",
    "generate_scenario",
    "run_demo",
    "scenario_files",
]
