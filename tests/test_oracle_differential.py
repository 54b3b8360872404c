"""Our plan simulator against an independent oracle, plan by plan.

The oracle is the ``unified_planning`` library (test-only): its PDDL reader and
its sequential plan validator. For ten domains — three classic ones written from
memory and seven small benchmarks shipped inside the installed library, STRIPS,
ADL, conditional effects, action costs and numeric fluents among them — we make
plans the oracle's own simulator says are executable (seeded random walks), cut
them, and break them in the ways a guesser does (see oracle/walks.py). Most goals
are rewritten to facts of a reached state, so that both valid and invalid plans
are common. Every plan must get the same verdict from both sides, with and
without ``keep_going``, and an invalid plan must fail at the same step.

Semantics both sides are meant to follow: PDDL 1.2 manual (McDermott et al.
1998) for STRIPS/ADL plans, PDDL2.1 (Fox & Long 2003, sec. 4-5) for numeric
fluents: a plan is valid iff each step's precondition holds in the state before
it and the goal holds in the state after the last step.

Known oracle behaviour we rely on (checked against its source, version 1.3.0):
- It cannot build a step with an undeclared action or object or the wrong
  number of arguments; our wrapper calls those steps inapplicable (see
  OracleVerdict in oracle/reference.py).
- It keeps ``total-cost`` out of its state (it becomes an action-cost metric);
  generated goals therefore never mention it.
"""

from __future__ import annotations

import functools
import os
import random
import time
import zlib
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import pytest

from oracle import (MUTATIONS, Case, all_cases, goal_from_state, load_reference, make_variant,
                    mutate, plan_text, random_walk)
from plansieve.critics.pddl import load_task
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.simulator import PlanSimulator

# Seeded for reproducible runs; both can be raised for a longer soak run, e.g.
# PLANSIEVE_ORACLE_PLANS=2000 PLANSIEVE_ORACLE_SEED=7 pytest tests/test_oracle_differential.py
SEED = int(os.environ.get("PLANSIEVE_ORACLE_SEED", "8675309"))
PLANS_PER_DOMAIN = int(os.environ.get("PLANSIEVE_ORACLE_PLANS", "220"))  # x10 domains
MAX_WALK = 25
CASES = all_cases()


@dataclass(frozen=True)
class Sample:
    problem: Path
    goal: str  # the goal as written, kept for failure messages (variants live in tmp)
    origin: str  # how the plan was made: walk, cut, mutation kind
    steps: tuple


@functools.lru_cache(maxsize=None)
def our_task(domain: str, problem: str):
    return load_task(domain, problem)


def to_plan(steps) -> Plan:
    return Plan(tuple(PlanStep(a, tuple(args)) for a, args in steps))


def _seed(case: Case) -> int:
    # zlib.crc32, not hash(): string hashes change from run to run.
    return SEED ^ zlib.crc32(case.name.encode())


def generate(case: Case, out_dir: Path) -> list[Sample]:
    """At least PLANS_PER_DOMAIN seeded plans for one domain, made by the oracle alone."""
    rng = random.Random(_seed(case))
    samples: list[Sample] = []

    def family(problem: Path, goal: str, steps: tuple, origin: str, ref, mutations: int) -> None:
        samples.append(Sample(problem, goal, origin, steps))
        for _ in range(2 if steps else 0):
            k = rng.randrange(len(steps))
            samples.append(Sample(problem, goal, f"{origin}, cut after {k} steps", steps[:k]))
        kinds = rng.sample(MUTATIONS, len(MUTATIONS))
        made = 0
        for kind in kinds:
            if made == mutations:
                break
            mutant = mutate(ref, steps, kind, rng)
            if mutant is None:
                continue
            made += 1
            samples.append(Sample(problem, goal, f"{origin}, {kind}", mutant))
            if rng.random() < 0.25:  # now and then a second mistake on top
                second = rng.choice(MUTATIONS)
                twice = mutate(ref, mutant, second, rng)
                if twice is not None:
                    samples.append(Sample(problem, goal, f"{origin}, {kind} + {second}", twice))

    round_ = 0
    while len(samples) < PLANS_PER_DOMAIN:
        base = case.problems[round_ % len(case.problems)]
        ref = load_reference(case.domain, base)
        if round_ % 4 == 0:
            # The benchmark's own goal: walks rarely reach it, so mostly invalid plans.
            walk = random_walk(ref, rng, rng.randint(0, MAX_WALK))
            family(base, "(as in the file)", walk.steps, "walk", ref, mutations=3)
        else:
            anchor = random_walk(ref, rng, rng.randint(0, MAX_WALK))
            goal = goal_from_state(ref, anchor.final_state, rng,
                                   negative=case.negative_goals, numeric=case.numeric)
            vref = make_variant(ref, goal, out_dir / case.name, f"g{round_}")
            variant, written = vref.problem_path, goal.pddl()
            # Harness self-check: a walk must reach the goal it was made from.
            own = vref.validate(anchor.steps)
            assert own.valid, f"harness broken: oracle rejects its own walk: {own.reason}"
            family(variant, written, anchor.steps, "anchor walk", vref, mutations=5)
            # A few more steps after the goal was reached: often still valid, not always.
            for _ in range(2):
                longer = random_walk(ref, rng, rng.randint(1, 4), after=anchor)
                extra = len(longer.steps) - len(anchor.steps)
                if extra:
                    samples.append(Sample(variant, written, f"anchor walk + {extra} more steps",
                                          longer.steps))
        round_ += 1
    return samples


def _first_failed_step(verdict) -> int | None:
    steps = [f.step for f in verdict.findings if f.step is not None]
    return min(steps) if steps else None


def _describe(case: Case, s: Sample, oracle, verdicts: dict) -> str:
    out = [f"domain:  {case.name} ({case.domain})",
           f"problem: {s.problem}",
           f"goal:    {s.goal}",
           f"origin:  {s.origin}",
           "plan:",
           plan_text(s.steps).rstrip("\n"),
           f"oracle:  {'VALID' if oracle.valid else 'INVALID'} (failed step {oracle.failed_step}): "
           f"{oracle.reason}"]
    for label, v in verdicts.items():
        out.append(f"ours ({label}): {'PASS' if v.passed else 'FAIL'}")
        for f in v.findings:
            out.append(f"    [{f.code}] step {f.step}: {f.message}")
    return "\n".join(out)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_simulator_agrees_with_oracle(case: Case, tmp_path_factory):
    started = time.perf_counter()
    samples = generate(case, tmp_path_factory.mktemp("variants"))
    strict, thorough = PlanSimulator(), PlanSimulator(keep_going=True)
    tally: Counter = Counter()
    mismatches: list[str] = []
    for s in samples:
        oracle = load_reference(case.domain, s.problem).validate(s.steps)
        task = our_task(str(case.domain), str(s.problem))
        plan = to_plan(s.steps)
        verdicts = {"stop at first": strict.check(task, plan),
                    "keep_going": thorough.check(task, plan)}
        tally["valid" if oracle.valid else
              "invalid at a step" if oracle.failed_step else "invalid at the goal"] += 1
        if not oracle.judged:
            tally["undeclared or wrong arity"] += 1
        # Source: the oracle (unified_planning 1.3.0 SequentialPlanValidator); both sides
        # meant to follow PDDL 1.2 (McDermott 1998) / PDDL2.1 (Fox & Long 2003) plan validity.
        troubles = [f"{label}: passed={v.passed}, oracle valid={oracle.valid}"
                    for label, v in verdicts.items() if v.passed != oracle.valid]
        if not troubles and not oracle.valid:
            # Same source: the first inapplicable step is fixed by the semantics too.
            for label, v in verdicts.items():
                ours = _first_failed_step(v)
                if ours != oracle.failed_step:
                    troubles.append(f"{label}: first failing step {ours}, oracle's {oracle.failed_step}")
        if troubles:
            mismatches.append("; ".join(troubles) + "\n" + _describe(case, s, oracle, verdicts))
    seconds = time.perf_counter() - started
    print(f"\n[{case.name}] {len(samples)} plans in {seconds:.1f}s: {dict(tally)}")

    assert not mismatches, (f"{len(mismatches)} of {len(samples)} plans judged differently "
                            f"in {case.name}; first ones:\n\n" + "\n\n".join(mismatches[:5]))
    # The comparison means little unless every kind of answer is common
    # (thresholds are common practice, well below what these seeds give).
    assert len(samples) >= PLANS_PER_DOMAIN
    assert tally["valid"] >= 0.05 * len(samples), tally
    assert tally["invalid at a step"] >= 0.1 * len(samples), tally
    assert tally["invalid at the goal"] >= 0.05 * len(samples), tally


def test_harness_on_a_worked_example():
    """The harness itself, on a plan checked by hand.

    Blocks p01: c sits on a, b is alone; the goal is the tower a-b-c. Worked by
    hand from the four blocks operators (IPC-2000 domain, from memory).
    """
    case = next(c for c in CASES if c.name == "blocks")
    problem = case.domain.parent / "p01.pddl"
    ref = load_reference(case.domain, problem)
    task = our_task(str(case.domain), str(problem))
    good = (("unstack", ("c", "a")), ("put-down", ("c",)), ("pick-up", ("b",)),
            ("stack", ("b", "c")), ("pick-up", ("a",)), ("stack", ("a", "b")))
    assert ref.validate(good).valid
    assert PlanSimulator().check(task, to_plan(good)).passed
    # Without the first step, put-down c needs (holding c): step 1 fails.
    assert ref.validate(good[1:]).failed_step == 1
    assert _first_failed_step(PlanSimulator().check(task, to_plan(good[1:]))) == 1
    # An undeclared action after an earlier failing step: the earlier one counts.
    broken = good[:1] + (("pick-up", ("a",)), ("levitate", ("a",)))
    verdict = ref.validate(broken)
    assert (verdict.valid, verdict.failed_step, verdict.judged) == (False, 2, True)
    # ...and on its own it is the first failure, decided by us, not the library.
    verdict = ref.validate(good[:1] + (("levitate", ("a",)),))
    assert (verdict.valid, verdict.failed_step, verdict.judged) == (False, 2, False)
    # The goal alone unmet: no failing step.
    assert ref.validate(good[:5]).failed_step is None
    assert not ref.validate(good[:5]).valid
