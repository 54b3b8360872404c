"""Plans found by an independent planner must pass our plan simulator.

``pyperplan`` (test-only) solves the classic problems in tests/domains/classic
with several searches; it implements STRIPS semantics on its own grounding, so
its plans are a second source of valid plans that none of our code made. Every
such plan must pass our simulator. Then each one-step deletion of it is judged
by the ``unified_planning`` oracle and must get the same verdict from us, failing
at the same step — deleting a step usually breaks a later precondition or the
goal, but not always (a step may be redundant), and the oracle decides which.

Semantics: PDDL 1.2 manual (McDermott et al. 1998): a plan is valid iff each
step's precondition holds in the state before it and the goal holds at the end.
"""

from __future__ import annotations

import functools
from pathlib import Path

import pytest
from pyperplan import search
from pyperplan.heuristics.relaxation import hAddHeuristic, hFFHeuristic
from pyperplan.planner import search_plan

from oracle import classic_cases, load_reference, plan_text
from plansieve.critics.pddl import load_task
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.simulator import PlanSimulator

# Three searches that return different plans on these problems: breadth-first
# (shortest), greedy best-first with h^FF, enforced hill-climbing with h^add.
SEARCHES = {
    "breadth-first": (search.breadth_first_search, None),
    "greedy-ff": (search.greedy_best_first_search, hFFHeuristic),
    "hill-climbing-add": (search.enforced_hillclimbing_search, hAddHeuristic),
}

PROBLEMS = [(case.name, case.domain, p) for case in classic_cases() for p in case.problems]


@functools.lru_cache(maxsize=None)
def found_plans(domain: Path, problem: Path) -> dict[tuple, list[str]]:
    """Distinct pyperplan plans for one problem, each with the searches that found it."""
    plans: dict[tuple, list[str]] = {}
    for label, (algorithm, heuristic) in SEARCHES.items():
        solution = search_plan(str(domain), str(problem), algorithm, heuristic)
        assert solution is not None, f"pyperplan ({label}) found no plan for {problem}"
        # pyperplan names a ground operator "(pick-up a)".
        steps = tuple(_split(op.name) for op in solution)
        plans.setdefault(steps, []).append(label)
    return plans


def _split(call: str) -> tuple[str, tuple[str, ...]]:
    words = call.strip("()").split()
    return words[0].lower(), tuple(w.lower() for w in words[1:])


def to_plan(steps) -> Plan:
    return Plan(tuple(PlanStep(a, args) for a, args in steps))


def _first_failed_step(verdict) -> int | None:
    steps = [f.step for f in verdict.findings if f.step is not None]
    return min(steps) if steps else None


def _report(problem: Path, steps, verdict, oracle=None) -> str:
    out = [f"problem: {problem}", "plan:", plan_text(steps).rstrip("\n")]
    if oracle is not None:
        out.append(f"oracle: {'VALID' if oracle.valid else 'INVALID'} "
                   f"(failed step {oracle.failed_step}): {oracle.reason}")
    out.append(f"ours: {'PASS' if verdict.passed else 'FAIL'}")
    out += [f"    [{f.code}] step {f.step}: {f.message}" for f in verdict.findings]
    return "\n".join(out)


@pytest.mark.parametrize("name,domain,problem", PROBLEMS,
                         ids=[f"{n}-{p.stem}" for n, _, p in PROBLEMS])
def test_planner_plans_pass_and_deletions_match_oracle(name, domain, problem):
    task = load_task(str(domain), str(problem))
    ref = load_reference(domain, problem)
    strict, thorough = PlanSimulator(), PlanSimulator(keep_going=True)
    deletions = 0
    for steps, labels in found_plans(domain, problem).items():
        assert steps, "these problems all need at least one step"
        # The two references must agree first, or the rest means nothing.
        oracle = ref.validate(steps)
        assert oracle.valid, f"oracle rejects pyperplan's plan ({labels}): {oracle.reason}"
        # Source: pyperplan 2.1's search (its own STRIPS grounding and successor function).
        for sim in (strict, thorough):
            v = sim.check(task, to_plan(steps))
            assert v.passed, f"pyperplan ({labels}) plan fails in ours:\n" + _report(problem, steps, v)

        for i in range(len(steps)):
            shorter = steps[:i] + steps[i + 1:]
            # Source: the oracle (unified_planning 1.3.0 SequentialPlanValidator).
            oracle = ref.validate(shorter)
            for sim in (strict, thorough):
                v = sim.check(task, to_plan(shorter))
                same = v.passed == oracle.valid and (
                    oracle.valid or _first_failed_step(v) == oracle.failed_step)
                assert same, (f"deleting step {i + 1} of the {labels} plan: ours and the oracle "
                              f"disagree (keep_going={sim.keep_going})\n"
                              + _report(problem, shorter, v, oracle))
            deletions += 1
    assert deletions > 0
