"""Where the differential tests find their domains.

Two sources: the classic domains we wrote from memory (tests/domains/classic),
and the small PDDL benchmarks that ship inside the installed
``unified_planning`` package (``unified_planning/test/pddl``). The latter are
read from the installed package at run time, never copied into this repository.

Of the shipped benchmarks, only the sequential ones are used. Left out, because
the plan simulator judges sequential plans only: car_nl (processes and events,
PDDL+), matchcellar, parking_action_cost, robot_fastener and visit_precedence
(durative actions, PDDL2.1 level 3) and htn-transport (HDDL, hierarchical).
"""

from __future__ import annotations

import importlib.resources
from dataclasses import dataclass
from pathlib import Path

CLASSIC = Path(__file__).resolve().parent.parent / "domains" / "classic"


@dataclass(frozen=True)
class Case:
    name: str
    domain: Path
    problems: tuple[Path, ...]
    # The domain declares :negative-preconditions or :adl, so goals may negate atoms.
    negative_goals: bool
    # The domain has numeric fluents that goals may compare.
    numeric: bool
    source: str


def shipped_benchmarks() -> Path:
    """The benchmark folder inside the installed unified_planning package."""
    root = Path(str(importlib.resources.files("unified_planning") / "test" / "pddl"))
    if not root.is_dir():
        raise FileNotFoundError(f"unified_planning's benchmark folder is missing: {root}")
    return root


def classic_cases() -> list[Case]:
    def case(name: str, source: str) -> Case:
        folder = CLASSIC / name
        return Case(name, folder / "domain.pddl", tuple(sorted(folder.glob("p*.pddl"))),
                    negative_goals=False, numeric=False, source=source)

    return [
        case("blocks", "IPC-2000 blocks world, 4 operators, from memory"),
        case("gripper", "IPC-1998 gripper, from memory"),
        case("logistics", "IPC-1998 logistics, from memory"),
    ]


def shipped_cases() -> list[Case]:
    root = shipped_benchmarks()

    def case(name: str, problems: tuple[str, ...], negative: bool, numeric: bool, what: str) -> Case:
        folder = root / name
        return Case(name, folder / "domain.pddl", tuple(folder / p for p in problems),
                    negative_goals=negative, numeric=numeric,
                    source=f"unified_planning/test/pddl/{name} (installed package): {what}")

    return [
        case("depot", ("problem.pddl",), False, False, "untyped STRIPS, IPC-2002 depots"),
        case("miconic", ("problem.pddl",), True, False,
             "ADL: quantified and disjunctive preconditions, conditional effects"),
        case("safe_road", ("problem.pddl",), True, False,
             "forall-when effects, negative preconditions, empty goal"),
        case("citycar", ("problem.pddl",), True, False,
             "action costs, conditional effects, negative preconditions"),
        case("tpp_metric", ("problem.pddl",), True, True,
             "numeric fluents, type hierarchy, equality, undefined fluents"),
        case("counters", ("problem.pddl", "problem2.pddl"), False, True,
             "numeric fluents with arithmetic preconditions and goals"),
        case("sailing", ("problem.pddl",), False, True,
             "numeric fluents with fractional effects"),
    ]


def all_cases() -> list[Case]:
    return classic_cases() + shipped_cases()
