"""The invented demo scenario and the demo pipeline.

:func:`generate_scenario` writes the sample files and their ground truth;
:mod:`curation.demo.benchmark_data` makes benchmark-sized data in memory;
:func:`run_demo` builds a store from the samples and runs every stage.
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
