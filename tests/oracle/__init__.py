"""Test-only helpers that judge plans with independent reference libraries.

Nothing here imports plansieve: the point is a second opinion our code did not
write. See reference.py (the oracle), walks.py (plans made by the oracle's own
simulator, and their mutants), goals.py (goal variants), benchmarks.py (domains).
"""

from .benchmarks import Case, all_cases, classic_cases, shipped_benchmarks, shipped_cases
from .goals import Goal, goal_from_state, make_variant, with_goal
from .reference import (OracleVerdict, ReferenceProblem, Step, load_reference, register_variant,
                        step_of)
from .walks import MUTATIONS, Walk, mutate, plan_text, random_walk

__all__ = [
    "Case", "all_cases", "classic_cases", "shipped_benchmarks", "shipped_cases",
    "Goal", "goal_from_state", "make_variant", "with_goal",
    "OracleVerdict", "ReferenceProblem", "Step", "load_reference", "register_variant", "step_of",
    "MUTATIONS", "Walk", "mutate", "plan_text", "random_walk",
]
