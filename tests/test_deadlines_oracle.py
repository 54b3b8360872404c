"""The deadline checker against an independent oracle on randomized timed plans.

Oracle: the ``unified_planning`` library's time-triggered plan validator (test-only;
see oracle/temporal.py for what it does, read from its source, version 1.3.0).
Domains: the durative-action domains the library ships in its test data
(matchcellar, parking_action_cost, visit_precedence; robot_fastener is left out
because the library's validator declines its forall effects) and our invented
orchard-drones domain (fluents in durations, duration inequalities, ``over all``
conditions, timed initial literals, an instantaneous action among durative ones).

Plans: a small scheduler written here places ground steps one by one at times on
a quarter grid, keeping a step only when the oracle says the plan so far runs
(goal ignored); then mutations break them the ways a guesser does — shifted
starts, changed durations, removed steps, a step moved onto another's time, a
step given or denied a duration. Goals are the problem's own and facts of the
oracle's final state, so both valid and invalid plans are common.

Rule: our pass/fail equals the oracle's on every plan, except where the two
semantics are known to part, each of which is recognised here, counted, and
explained beside its check:

``mutex``  Our checker applies PDDL 2.1's separation rule (Fox & Long 2003,
           sec. 8): interfering happenings closer than the tolerance make a plan
           invalid. The oracle has no such rule and judges them as one
           simultaneous update. Recognised by a ``happenings-too-close`` finding.
``double`` The oracle rejects two effects of different steps on one fact at one
           time even when they agree (both add it); PDDL 2.1 counts only
           contradicting or read/write pairs as interference, and so do we.
``instant-duration`` The oracle ignores a duration written on an instantaneous
           step; we report it (a positive duration on an action the domain makes
           instantaneous is a mistake in the plan; see deadlines.py).
``late-literal`` The oracle reads the goal after every timed initial literal,
           also those stamped after the plan ends; we read it when the plan ends
           (the goal is what the plan achieves; later literals are not its doing).

Size: ``PLANSIEVE_ORACLE_PLANS`` (scheduled plans per domain; mutants come on
top) and ``PLANSIEVE_ORACLE_SEED``, as for the sequential comparison.
"""

from __future__ import annotations

import os
import random
import re
from collections import Counter
from fractions import Fraction
from pathlib import Path

import pytest

from oracle.temporal import TemporalReference
from plansieve.critics.deadlines import DeadlineChecker
from plansieve.critics.model import Task
from plansieve.critics.pddl import load_domain, parse_problem
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.simulator import PlanSimulator

SEED = int(os.environ.get("PLANSIEVE_ORACLE_SEED", "8675309"))
# scheduled plans per domain; each brings about four mutants
PLANS = max(1, int(os.environ.get("PLANSIEVE_ORACLE_PLANS", "220")) // 10)
MAX_STEPS = 8
Q = Fraction(1, 4)  # the time grid: exact in binary, so plan text and floats keep it

SHIPPED = Path(__import__("unified_planning").__file__).parent / "test" / "pddl"
HERE = Path(__file__).parent / "domains" / "temporal"
DOMAINS = {
    # Source: unified_planning 1.3.0 package data (test/pddl/...).
    "matchcellar": (SHIPPED / "matchcellar" / "domain.pddl", SHIPPED / "matchcellar" / "problem.pddl"),
    "parking": (SHIPPED / "parking_action_cost" / "domain.pddl",
                SHIPPED / "parking_action_cost" / "problem.pddl"),
    "visit_precedence": (SHIPPED / "visit_precedence" / "domain.pddl",
                         SHIPPED / "visit_precedence" / "problem.pddl"),
    # Our own invented scenario (tests/domains/temporal/orchard).
    "orchard": (HERE / "orchard" / "domain.pddl", HERE / "orchard" / "p01.pddl"),
}


# ---------------------------------------------------------------------------
# Plans


def _duration(ref: TemporalReference, name, args, rng: random.Random):
    if not ref.is_durative(name):
        return None
    lo, hi, lo_open, hi_open = ref.duration_bounds(name, args)
    if lo == hi:
        return lo
    options = [x for x in (lo, (lo + hi) / 2, hi, lo + Q)
               if (lo < x or (x == lo and not lo_open)) and (x < hi or (x == hi and not hi_open))]
    return rng.choice(options)


def _ends(steps) -> list[Fraction]:
    return [t + (d or 0) for t, _, _, d in steps]


def schedule_plan(ref: TemporalReference, rng: random.Random) -> list:
    """A plan the oracle says runs (goal ignored), built by trying steps at grid times."""
    steps: list = []
    for _ in range(rng.randint(1, MAX_STEPS)):
        pool = ref.candidates[:]
        rng.shuffle(pool)
        placed = False
        for name, args in pool[:12]:
            d = _duration(ref, name, args, rng)
            last = max((t for t, *_ in steps), default=Fraction(0))
            times = sorted({last + Q * k for k in (1, 2)} | {e + Q for e in _ends(steps)}
                           | ({Fraction(0)} if not steps else set()))
            rng.shuffle(times)
            for t in times[:2]:
                trial = steps + [(t, name, args, d)]
                if ref.validate(trial, goals=False).valid:
                    steps, placed = trial, True
                    break
            if placed:
                break
        if not placed:
            break
    return sorted(steps, key=lambda s: s[0])


def mutate(steps: list, rng: random.Random) -> tuple[str, list]:
    steps = list(steps)
    kinds = ["shift", "duration", "remove", "same-time", "shift-small"]
    if any(d is not None for *_, d in steps):
        kinds.append("drop-duration")
    kind = rng.choice(kinds)
    i = rng.randrange(len(steps))
    t, name, args, d = steps[i]
    if kind == "shift":
        t = max(Fraction(0), t + Q * rng.choice([-24, -8, -4, -2, -1, 1, 2, 4, 8, 24]))
        steps[i] = (t, name, args, d)
    elif kind == "shift-small":  # below the default tolerance of 0.001
        steps[i] = (t + Fraction(1, 2048), name, args, d)
    elif kind == "duration":
        if d is None:
            steps[i] = (t, name, args, Q * 2)  # an instantaneous step given a duration
        else:
            steps[i] = (t, name, args, max(Q, d + Q * rng.choice([-4, -2, -1, 1, 2, 4])))
    elif kind == "remove":
        del steps[i]
    elif kind == "same-time":
        j = rng.randrange(len(steps))
        steps[i] = (steps[j][0], name, args, d)
    else:
        j = rng.choice([k for k, s in enumerate(steps) if s[3] is not None])
        t, name, args, d = steps[j]
        steps[j] = (t, name, args, None)
        return kind, steps
    return kind, steps


def _goal_text(facts: tuple) -> str:
    return "(and " + " ".join("(" + " ".join(f) + ")" for f in facts) + ")"


_GOAL = re.compile(r"\(:goal", re.IGNORECASE)


def _replace_goal(problem_text: str, goal: str) -> str:
    m = _GOAL.search(problem_text)
    depth, i = 0, m.start()
    while True:
        c = problem_text[i]
        depth += (c == "(") - (c == ")")
        i += 1
        if depth == 0:
            break
    return problem_text[:m.start()] + f"(:goal {goal})" + problem_text[i:]


class Side:
    """Both readings of one domain and problem."""

    def __init__(self, name: str) -> None:
        dpath, ppath = DOMAINS[name]
        self.ref = TemporalReference(dpath, ppath)
        self.domain = load_domain(dpath)
        self.problem_text = ppath.read_text()
        self.task = Task(self.domain, parse_problem(self.problem_text, self.domain, str(ppath)))
        self._variants: dict[tuple, Task] = {}

    def task_for(self, goal_facts: tuple | None) -> Task:
        if goal_facts is None:
            return self.task
        got = self._variants.get(goal_facts)
        if got is None:
            text = _replace_goal(self.problem_text, _goal_text(goal_facts))
            got = self._variants[goal_facts] = Task(self.domain, parse_problem(text, self.domain))
        return got


def _plan(steps) -> Plan:
    return Plan(tuple(PlanStep(name, args, float(t), None if d is None else float(d))
                      for t, name, args, d in steps))


def samples(name: str, side: Side, rng: random.Random):
    """(origin, steps, goal facts or None) triples for one domain."""
    for _ in range(PLANS):
        steps = schedule_plan(side.ref, rng)
        if not steps:
            continue
        verdict = side.ref.validate(steps, goals=False)
        goal = None
        if verdict.final is not None and rng.random() < 0.6:
            atoms = sorted(a for a in verdict.final[0]
                           if a not in side.task.problem.init or rng.random() < 0.2)
            if atoms:
                goal = tuple(rng.sample(atoms, min(len(atoms), rng.randint(1, 3))))
        yield "scheduled", steps, goal
        for _ in range(4):
            kind, mutant = mutate(steps, rng)
            if mutant:
                yield kind, mutant, goal


# ---------------------------------------------------------------------------
# Known differences, each recognised from the plan itself


def _late_literal(task: Task, steps, goal_facts) -> set[str]:
    """The goal facts (as PDDL text) that a timed literal after the plan's end changes."""
    end = max(t + (d or 0) for t, _, _, d in steps)
    goal_atoms = set(goal_facts) if goal_facts is not None else set(_atoms_of(task.problem.goal))
    out = set()
    for til in task.problem.timed_literals:
        atom = getattr(til.effect, "atom", None)
        if Fraction(repr(til.time)) > end and atom is not None and atom.key in goal_atoms:
            out.add("(" + " ".join(atom.key) + ")")
    return out


def _atoms_of(f):
    from plansieve.critics.model import Atom
    if isinstance(f, Atom):
        yield f.key
    for p in getattr(f, "parts", ()):
        yield from _atoms_of(p)


def _known_difference(ours, theirs, late_literal: set[str]) -> str | None:
    """Which documented difference (module docstring) explains a disagreement, if any."""
    if "happenings-too-close" in ours.codes():
        return "mutex"
    if ours.passed:  # the oracle rejects
        if "Conflicting effects" in theirs.reason:
            return "double"
        if late_literal and "UNSATISFIED_GOALS" in theirs.reason:
            return "late-literal"
        return None
    # we reject, the oracle accepts: every finding of ours must be an explained one
    kinds = set()
    for f in ours.findings:
        if f.code == "duration-out-of-bounds" and f.constraint == "(instantaneous)":
            kinds.add("instant-duration")
        elif f.code == "goal-unmet" and f.condition in late_literal:
            kinds.add("late-literal")
        else:
            return None
    return "+".join(sorted(kinds))


def judge(name: str) -> Counter:
    rng = random.Random(f"{SEED}-{name}")
    side = Side(name)
    assert side.ref.supported()
    checker = DeadlineChecker()
    simulator = PlanSimulator()
    tally: Counter = Counter()
    for origin, steps, goal in samples(name, side, rng):
        task = side.task_for(goal)
        plan = _plan(steps)
        ours = checker.check(task, plan)
        tally["plans"] += 1
        if any(d is None and side.ref.is_durative(n) for _, n, _, d in steps):
            # Beyond the oracle (it asserts every durative step has a duration).
            # Source: PDDL2.1 (Fox & Long 2003, sec. 5.3): a durative action in a
            # plan is given its duration; without one the step cannot be placed.
            assert not ours.passed and "duration-out-of-bounds" in ours.codes()
            tally["beyond oracle: no duration"] += 1
            continue
        theirs = side.ref.validate(steps, goal_facts=goal)
        tally[f"oracle-{'valid' if theirs.valid else 'invalid'}"] += 1
        if ours.passed == theirs.valid:
            tally["agree"] += 1
            for code in set(ours.codes()):
                tally[f"agreed, ours had {code}"] += 1
            if theirs.valid:
                # A plan that is valid in time also runs in the plan simulator's time order.
                assert simulator.check(task, plan).passed, (name, origin, steps)
            continue
        why = _known_difference(ours, theirs, _late_literal(task, steps, goal))
        if why is None:
            pytest.fail(f"{name} ({origin}): ours {'pass' if ours.passed else 'fail'} "
                        f"{[f.message for f in ours.findings]}, oracle "
                        f"{'valid' if theirs.valid else 'invalid'} ({theirs.reason}); plan "
                        f"{[(str(t), n, a, str(d)) for t, n, a, d in steps]}, goal {goal}")
        tally[f"differ: {why}"] += 1
    return tally


@pytest.mark.parametrize("name", sorted(DOMAINS))
def test_deadline_checker_agrees_with_oracle(name):
    tally = judge(name)
    print(name, dict(tally))
    assert tally["plans"] >= PLANS, tally
    # Both verdicts must be common, or the comparison proves little.
    assert tally["oracle-valid"] >= max(1, tally["plans"] // 10), tally
    assert tally["oracle-invalid"] >= max(1, tally["plans"] // 10), tally
    aside = sum(v for k, v in tally.items() if k.startswith(("differ", "beyond")))
    assert tally["agree"] + aside == tally["plans"]


# Hand-placed plans at the edges of the orchard's windows (west-rows open [3, 14),
# east-rows until 9, hilltop [5, 11) and from 16): the random plans above seldom reach
# them. Each is judged by both sides; the expected verdict is worked by hand from
# PDDL2.1 (invariants over the open interval) and PDDL2.2 (literals at their times).
EDGES = [
    # (plan, valid?)
    ([("0", "fly", ("d1", "barn", "hilltop"), "4"), ("16", "spray", ("d1", "hilltop"), "1")],
     True),   # opens again at 16, the spray's start: the state inside (16, 17) has it open
    ([("0", "fly", ("d1", "barn", "west-rows"), "3"), ("12", "spray", ("d1", "west-rows"), "2")],
     True),   # closes at 14, exactly when the spray ends: the open interval is clear
    ([("0", "fly", ("d1", "barn", "west-rows"), "3"), ("12.5", "spray", ("d1", "west-rows"), "2")],
     False),  # closes at 14, inside (12.5, 14.5)
    ([("0", "fly", ("d1", "barn", "east-rows"), "2"), ("8", "spray", ("d1", "east-rows"), "1")],
     True),   # east-rows closes at 9 = the end
    ([("0", "fly", ("d1", "barn", "east-rows"), "2"), ("8", "spray", ("d1", "east-rows"), "2")],
     False),
    ([("0", "fly", ("d1", "barn", "hilltop"), "4"), ("4.5", "spray", ("d1", "hilltop"), "2")],
     False),  # the hilltop opens at 5, inside (4.5, 6.5)
    ([("0", "fly", ("d1", "barn", "hilltop"), "4"), ("10", "spray", ("d1", "hilltop"), "1")],
     True),
    ([("0", "fly", ("d1", "barn", "hilltop"), "4"), ("15", "spray", ("d1", "hilltop"), "1")],
     False),  # closed from 11 to 16
]


@pytest.mark.parametrize("plan, valid", EDGES)
def test_window_edges_agree_with_oracle(plan, valid):
    side = _orchard()
    steps = [(Fraction(t), n, a, Fraction(d)) for t, n, a, d in plan]
    goal = (("sprayed", plan[-1][2][1]),)
    theirs = side.ref.validate(steps, goal_facts=goal)
    ours = DeadlineChecker().check(side.task_for(goal), _plan(steps))
    assert theirs.valid is valid, theirs.reason  # the oracle agrees with the hand working
    assert ours.passed is valid, [f.message for f in ours.findings]
    if not valid:
        assert ours.codes() == ["window-violated"]
        assert ours.findings[0].part == "over-all"


_ORCHARD: list = []


def _orchard() -> Side:
    if not _ORCHARD:
        _ORCHARD.append(Side("orchard"))
    return _ORCHARD[0]
