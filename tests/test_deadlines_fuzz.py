"""Fuzzing the deadline checker: perturbed timed plans, random constraints and limits.

What must hold, whatever the input (the project's rule for bad input, DEVELOPERS.md
"Errors"): the deadline checker and the plan simulator answer with a verdict, or
raise one of our ``InputError`` subclasses — never another exception, never a hang.
A verdict passes exactly when it has no finding, and a deadline checker verdict has
one timeline line per deadline plus one for a makespan limit.

Inputs start from the valid kiln task and plan of test_deadlines.py (an invented
scenario) and are perturbed: times shifted, duplicated, made equal or tiny apart,
durations changed or dropped, steps removed or renamed, odd numbers (negative,
infinite, not a number). Constraint formulas are drawn from the PDDL3 operators
over the kiln's facts and fluents; limits files get random deadlines, makespans and
tolerances. Sizes: a few dozen examples here; the ``slow`` twins take
``PLANSIEVE_FUZZ_EXAMPLES`` (``make fuzz``).
"""

from __future__ import annotations

import math
import os

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from plansieve.critics.deadlines import DeadlineChecker
from plansieve.critics.errors import InputError
from plansieve.critics.limits import attach_limits, parse_limits
from plansieve.critics.model import Task
from plansieve.critics.pddl import parse_domain, parse_problem
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.plan_text import read_plan
from plansieve.critics.simulator import PlanSimulator
from test_deadlines import GOOD, KILN, KILN_P

FAST = 40
LONG = int(os.environ.get("PLANSIEVE_FUZZ_EXAMPLES") or 60)
COMMON = dict(deadline=3000, suppress_health_check=[HealthCheck.too_slow,
                                                    HealthCheck.data_too_large,
                                                    HealthCheck.filter_too_much])

DOMAIN = parse_domain(KILN, "kiln.pddl")
BASE = read_plan(GOOD, "kiln.plan").steps
ACTIONS = ["heat-up", "fire", "cool", "write-log", "glaze", "bake"]
OBJECTS = ["o1", "o2", "a", "b", "o3"]
FACTS = ["(hot o1)", "(hot o2)", "(free o1)", "(fired a)", "(fired b)", "(glazed a)",
         "(raw b)", "(staffed)", "(> (gas) 7)", "(<= (log-length) 2)", "(= (gas) (gas))"]

odd = st.sampled_from([-1.0, math.inf, math.nan, 1e300, 0.0])
times = st.floats(0, 40, allow_nan=False) | st.sampled_from([0.0005, 3.5, 6.6]) | odd
durations = st.none() | st.floats(0, 10, allow_nan=False) | odd


@st.composite
def perturbed_plans(draw) -> Plan:
    steps = list(BASE)
    for _ in range(draw(st.integers(0, 6))):
        kind = draw(st.sampled_from(["shift", "duration", "remove", "add", "copy", "rename",
                                     "same-time"]))
        if not steps and kind != "add":
            continue
        i = draw(st.integers(0, max(0, len(steps) - 1)))
        if kind == "shift":
            steps[i] = PlanStep(steps[i].action, steps[i].args,
                                draw(times), steps[i].duration)
        elif kind == "duration":
            steps[i] = PlanStep(steps[i].action, steps[i].args, steps[i].time, draw(durations))
        elif kind == "remove":
            del steps[i]
        elif kind == "add":
            args = tuple(draw(st.lists(st.sampled_from(OBJECTS), max_size=3)))
            steps.insert(i, PlanStep(draw(st.sampled_from(ACTIONS)), args, draw(times),
                                     draw(durations)))
        elif kind == "copy":
            steps.insert(i, steps[i])
        elif kind == "rename":
            steps[i] = PlanStep(draw(st.sampled_from(ACTIONS)), steps[i].args, steps[i].time,
                                steps[i].duration)
        else:
            j = draw(st.integers(0, len(steps) - 1))
            steps[i] = PlanStep(steps[i].action, steps[i].args, steps[j].time,
                                steps[i].duration)
    if draw(st.integers(0, 5)) == 0 and steps:  # now and then a step without a time
        k = draw(st.integers(0, len(steps) - 1))
        steps[k] = PlanStep(steps[k].action, steps[k].args, None, steps[k].duration)
    return Plan(tuple(steps))


def _formula(depth: int):
    leaf = st.sampled_from(FACTS)
    if depth == 0:
        return leaf
    sub = _formula(depth - 1)
    return leaf | st.builds(lambda a: f"(not {a})", sub) | st.builds(
        lambda a, b: f"(and {a} {b})", sub, sub) | st.builds(lambda a, b: f"(or {a} {b})", sub, sub)


number = st.sampled_from(["0", "1", "2.5", "7", "10.7", "12", "30"])


@st.composite
def constraints(draw) -> str:
    parts = []
    for _ in range(draw(st.integers(0, 4))):
        f, g = draw(_formula(2)), draw(_formula(1))
        t1, t2 = draw(number), draw(number)
        parts.append(draw(st.sampled_from([
            f"(always {f})", f"(sometime {f})", f"(at end {f})", f"(at-most-once {f})",
            f"(within {t1} {f})", f"(sometime-before {f} {g})", f"(sometime-after {f} {g})",
            f"(always-within {t1} {f} {g})", f"(hold-during {t1} {t2} {f})",
            f"(hold-after {t1} {f})", f"(preference p (sometime {f}))",
            f"(forall (?o - oven) (sometime (hot ?o)))", "(always (<= (gas) 9))"])))
    return "(and " + " ".join(parts) + ")"


@st.composite
def limits(draw) -> str | None:
    if draw(st.booleans()):
        return None
    out = []
    for _ in range(draw(st.integers(0, 2))):
        out.append(f'[[deadline]]\ncondition = "{draw(st.sampled_from(FACTS))}"\n'
                   f"by = {draw(number)}\n")
    settings_ = []
    if draw(st.booleans()):
        settings_.append(f"makespan = {draw(st.sampled_from(['1', '10', '10.8', '50']))}")
    if draw(st.booleans()):
        settings_.append(f"tolerance = {draw(st.sampled_from(['0.0001', '0.01', '0.5']))}")
    if draw(st.booleans()):
        settings_.append('clock = "(gas)"')
    if settings_:
        out.append("[time]\n" + "\n".join(settings_) + "\n")
    return "".join(out)


def _task(cons: str, lim: str | None) -> Task:
    problem = KILN_P.replace("(:goal", f"(:constraints {cons})\n  (:goal")
    task = Task(DOMAIN, parse_problem(problem, DOMAIN, "kiln-p.pddl"))
    if lim is not None:
        task = attach_limits(task, parse_limits(lim, "kiln.toml"), "kiln.toml")
    return task


def _judge(task: Task, plan: Plan, tolerance=None) -> None:
    try:
        v = DeadlineChecker(tolerance=tolerance).check(task, plan)
    except InputError as e:
        assert e.spots and e.render()
        assert any(s.time is None for s in plan.steps) or any(
            s.time is not None and not (0 <= s.time < math.inf) for s in plan.steps)
    else:
        assert v.passed == (not v.findings)
        n_deadlines = sum(1 for f in v.timeline if f.what != "makespan")
        assert n_deadlines <= len(v.timeline)
        for f in v.findings:
            assert f.message
    s = PlanSimulator().check(task, plan)
    assert s.passed == (not s.findings)


def _plans_prop(case) -> None:
    plan, tolerance = case
    _judge(_task("(and)", None), plan, tolerance)


def _constraints_prop(case) -> None:
    cons, lim, plan, sequential = case
    try:
        task = _task(cons, lim)
    except InputError:
        return  # a drawn formula the reader refuses: our error, fine
    if sequential:
        plan = Plan(tuple(PlanStep(s.action, s.args) for s in plan.steps))
    _judge(task, plan)


def twin(strategy, body, name):
    @settings(max_examples=FAST, **COMMON)
    @given(strategy)
    def quick(x):
        body(x)

    @pytest.mark.slow
    @settings(max_examples=LONG, **COMMON)
    @given(strategy)
    def long(x):
        body(x)

    quick.__name__ = quick.__qualname__ = f"test_{name}"
    long.__name__ = long.__qualname__ = f"test_{name}_long"
    return quick, long


test_timed_plan_perturbations, test_timed_plan_perturbations_long = twin(
    st.tuples(perturbed_plans(), st.none() | st.sampled_from([0.0001, 0.01, 1.0])), _plans_prop,
    "timed_plan_perturbations")

test_random_constraints, test_random_constraints_long = twin(
    st.tuples(constraints(), limits(), perturbed_plans(), st.booleans()), _constraints_prop,
    "random_constraints")
