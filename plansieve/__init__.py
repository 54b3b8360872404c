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
    "LimitCrossed": "plansieve.critics.verdict",
    # limits files
    "Limits": "plansieve.critics.limits",
    "load_limits": "plansieve.critics.limits",
    "parse_limits": "plansieve.critics.limits",
    "attach_limits": "plansieve.critics.limits",
    "critics_for": "plansieve.critics.select",
    # the loop
    "sieve": "plansieve.loop.engine",
    "sieve_sync": "plansieve.loop.engine",
    "Outcome": "plansieve.loop.outcome",
    "RoundSummary": "plansieve.loop.outcome",
    "CriticChain": "plansieve.loop.chain",
    "Link": "plansieve.loop.chain",
    "advisory": "plansieve.loop.chain",
    "FeedbackNote": "plansieve.loop.feedback",
    "compose_feedback": "plansieve.loop.feedback",
    "Budget": "plansieve.loop.budget",
    "Prices": "plansieve.loop.budget",
    "at_most_rounds": "plansieve.loop.budget",
    "at_most_seconds": "plansieve.loop.budget",
    "at_most_tokens": "plansieve.loop.budget",
    "at_most_cost": "plansieve.loop.budget",
    "budget_of": "plansieve.loop.budget",
    "TraceWriter": "plansieve.loop.trace",
    "FileSink": "plansieve.loop.trace",
    "MemorySink": "plansieve.loop.trace",
    "CallbackSink": "plansieve.loop.trace",
    "Redactor": "plansieve.loop.trace",
    # guessers
    "Guesser": "plansieve.adapters.guesser",
    "GuessRequest": "plansieve.adapters.guesser",
    "Guess": "plansieve.adapters.guesser",
    "Usage": "plansieve.adapters.guesser",
    "Attempt": "plansieve.adapters.guesser",
    "GuesserFailed": "plansieve.adapters.guesser",
    "HeuristicGuesser": "plansieve.adapters.heuristic",
    "RetryNote": "plansieve.adapters.guesser",
    "HttpGuesser": "plansieve.adapters.http_guesser",
    "HttpSettings": "plansieve.adapters.http_settings",
    "EndpointUnreachable": "plansieve.adapters.http_errors",
    "EndpointTimedOut": "plansieve.adapters.http_errors",
    "EndpointRefused": "plansieve.adapters.http_errors",
    "EndpointBusy": "plansieve.adapters.http_errors",
    "AnswerTooLarge": "plansieve.adapters.http_errors",
    "AnswerUnreadable": "plansieve.adapters.http_errors",
    "NoTimeToWait": "plansieve.adapters.http_errors",
    "close_shared_clients": "plansieve.adapters.http_pool",
    # configuration files
    "RunConfig": "plansieve.adapters.config_file",
    "load_config": "plansieve.adapters.config_file",
    "effective_text": "plansieve.adapters.config_file",
    "MistakeRates": "plansieve.adapters.mistakes",
    "ScriptedGuesser": "plansieve.adapters.scripted",
    "ReplayGuesser": "plansieve.adapters.replay",
    # traces
    "read_trace": "plansieve.loop.trace_read",
    "verify_trace": "plansieve.loop.trace_read",
    "TraceIntegrity": "plansieve.loop.trace_read",
    "TraceError": "plansieve.loop.trace",
    "key_from_env": "plansieve.loop.trace",
    "Totals": "plansieve.loop.events",
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
    from plansieve.adapters.config_file import RunConfig, effective_text, load_config
    from plansieve.adapters.guesser import (
        Attempt, Guess, Guesser, GuesserFailed, GuessRequest, RetryNote, Usage,
    )
    from plansieve.adapters.heuristic import HeuristicGuesser
    from plansieve.adapters.http_errors import (
        AnswerTooLarge, AnswerUnreadable, EndpointBusy, EndpointRefused, EndpointTimedOut,
        EndpointUnreachable, NoTimeToWait,
    )
    from plansieve.adapters.http_guesser import HttpGuesser
    from plansieve.adapters.http_pool import close_shared_clients
    from plansieve.adapters.http_settings import HttpSettings
    from plansieve.adapters.mistakes import MistakeRates
    from plansieve.adapters.replay import ReplayGuesser
    from plansieve.adapters.scripted import ScriptedGuesser
    from plansieve.loop.events import Totals
    from plansieve.loop.trace import TraceError, key_from_env
    from plansieve.loop.trace_read import TraceIntegrity, read_trace, verify_trace
    from plansieve.critics.limits import Limits, attach_limits, load_limits, parse_limits
    from plansieve.critics.select import critics_for
    from plansieve.critics.verdict import Finding, Hint, LimitCrossed, Verdict
    from plansieve.loop.budget import (
        Budget, Prices, at_most_cost, at_most_rounds, at_most_seconds, at_most_tokens,
        budget_of,
    )
    from plansieve.loop.chain import CriticChain, Link, advisory
    from plansieve.loop.engine import sieve, sieve_sync
    from plansieve.loop.feedback import FeedbackNote, compose_feedback
    from plansieve.loop.outcome import Outcome, RoundSummary
    from plansieve.loop.trace import CallbackSink, FileSink, MemorySink, Redactor, TraceWriter
