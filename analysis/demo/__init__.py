"""The demo scenario generator: synthetic actuations of an invented dry-powder inhaler, with ground truth.

Public API:
    generate(out_dir, *, scenario, seed=None, jobs=None, progress=None) -> GenerationSummary
    load_scenario(name_or_path) -> Scenario
    plan_scenario(scenario, *, seed=None) -> list[PlannedActuation]
    GenerationSummary, Scenario, GROUND_TRUTH_COLUMNS, FAULT_KINDS, SCENARIO_DIR
The sound models are in analysis.demo.physics (pure functions, sources in their docstrings).
"""

from analysis.demo.generator import GROUND_TRUTH_COLUMNS, GenerationSummary, PlannedActuation, generate, plan_scenario
from analysis.demo.scenario import FAULT_KINDS, SCENARIO_DIR, Scenario, load_scenario

__all__ = [
    "generate",
    "load_scenario",
    "plan_scenario",
    "GenerationSummary",
    "PlannedActuation",
    "Scenario",
    "GROUND_TRUTH_COLUMNS",
    "FAULT_KINDS",
    "SCENARIO_DIR",
]
