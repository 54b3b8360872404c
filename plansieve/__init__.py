"""plansieve: a guesser proposes plans; sound critics written against a PDDL model dispose.

The public API lives here; the modules behind it are private to the package
layout (``plansieve.critics``, ``plansieve.loop``, ``plansieve.adapters``).
Names load on first use, so ``import plansieve`` stays cheap for the CLI.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_EXPORTS: dict[str, str] = {
    # the model
    "Domain": "plansieve.critics.model",
    "Problem": "plansieve.critics.model",
    "Task": "plansieve.critics.model",
    # reading PDDL
    "parse_domain": "plansieve.critics.pddl",
    "parse_problem": "plansieve.critics.pddl",
    "load_domain": "plansieve.critics.pddl",
    "load_problem": "plansieve.critics.pddl",
    "load_task": "plansieve.critics.pddl",
    "build_problem": "plansieve.critics.pddl",
    # plans
    "Plan": "plansieve.critics.plan",
    "PlanStep": "plansieve.critics.plan",
    "read_plan": "plansieve.critics.plan_text",
    "read_plan_json": "plansieve.critics.plan_text",
    "load_plan": "plansieve.critics.plan_text",
    "extract_plan": "plansieve.adapters.extract",
    "Extraction": "plansieve.adapters.extract",
    # critics
    "Critic": "plansieve.critics.protocol",
    "PlanSimulator": "plansieve.critics.simulator",
    "check": "plansieve.critics.check",
    "CheckResult": "plansieve.critics.check",
    "Verdict": "plansieve.critics.verdict",
    "Finding": "plansieve.critics.verdict",
    "Hint": "plansieve.critics.verdict",
    # errors
    "PlansieveError": "plansieve.critics.errors",
    "InputError": "plansieve.critics.errors",
    "PddlSyntaxError": "plansieve.critics.errors",
    "ModelError": "plansieve.critics.errors",
    "UnsupportedRequirement": "plansieve.critics.errors",
    "PlanReadError": "plansieve.critics.errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'plansieve' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__


if TYPE_CHECKING:  # for type checkers and IDEs
    from plansieve.adapters.extract import Extraction, extract_plan
    from plansieve.critics.check import CheckResult, check
    from plansieve.critics.errors import (
        InputError, ModelError, PddlSyntaxError, PlanReadError, PlansieveError,
        UnsupportedRequirement,
    )
    from plansieve.critics.model import Domain, Problem, Task
    from plansieve.critics.pddl import (
        build_problem, load_domain, load_problem, load_task, parse_domain, parse_problem,
    )
    from plansieve.critics.plan import Plan, PlanStep
    from plansieve.critics.plan_text import load_plan, read_plan, read_plan_json
    from plansieve.critics.protocol import Critic
    from plansieve.critics.simulator import PlanSimulator
    from plansieve.critics.verdict import Finding, Hint, Verdict
