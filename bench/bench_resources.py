"""Speed of the resource counter on a long numeric plan, against a reference library and itself.

Every figure is measured in this run; nothing is compared with a stored number.

  a. a 10,000-step numeric plan with two resources bounded by PDDL3 ``always``
     constraints: our resource counter (cold and warm), and the plan simulator plus the
     counter together, against the ``unified_planning`` SequentialPlanValidator on the
     same files (the oracle, bench-only), which checks the constraints as state
     invariants after every step along with the preconditions and the goal;
  b. our counter's time per step at 2,500, 10,000 and 40,000 steps (linear growth).

The scenario is our own: a fleet of delivery drones hopping between landing pads,
charging now and then; the plan is a seeded random walk of legal moves that keeps
both resources in bounds, so every contender runs it to the end.

Timing as in bench_check.py: ``time.perf_counter``, garbage collection paused while a
measurement runs, best of several runs.
"""

from __future__ import annotations

import os
import random
import sys
import time

from bench_check import fmt_s, fmt_us, print_table, row, timed
from oracle_io import oracle_read, oracle_verdict

from plansieve.critics.model import Task
from plansieve.critics.pddl import parse_domain, parse_problem
from plansieve.critics.plan_text import read_plan
from plansieve.critics.resources import ResourceCounter
from plansieve.critics.simulator import PlanSimulator

SEED = 20240611
DRONES = [f"drone-{i}" for i in range(1, 4)]
PADS = [f"pad-{c}" for c in "abcd"]
SPEND_CEILING = 10_000_000

DOMAIN = """\
(define (domain drone-hops)
  (:requirements :typing :numeric-fluents :constraints)
  (:types drone pad)
  (:predicates (at ?d - drone ?p - pad))
  (:functions (battery ?d - drone) (spent))
  (:action fly
    :parameters (?d - drone ?from ?to - pad)
    :precondition (and (at ?d ?from) (>= (battery ?d) 10))
    :effect (and (not (at ?d ?from)) (at ?d ?to)
                 (decrease (battery ?d) 10) (increase (spent) 3)))
  (:action charge
    :parameters (?d - drone ?p - pad)
    :precondition (and (at ?d ?p) (<= (battery ?d) 80))
    :effect (and (increase (battery ?d) 20) (increase (spent) 1))))
"""


def walk(n_steps: int, seed: int) -> tuple[str, str]:
    """The problem and a plan of ``n_steps`` legal moves, made by plain Python."""
    rng = random.Random(seed)
    at = {d: rng.choice(PADS) for d in DRONES}
    battery = {d: rng.randrange(20, 101, 10) for d in DRONES}
    init = " ".join(f"(at {d} {p}) (= (battery {d}) {battery[d]})" for d, p in at.items())
    steps = []
    for _ in range(n_steps):
        d = rng.choice(DRONES)
        moves = [("charge", d, at[d])] if battery[d] <= 80 else []
        if battery[d] >= 10:
            moves += [("fly", d, at[d], p) for p in PADS if p != at[d]]
        m = rng.choice(moves)
        if m[0] == "fly":
            at[d], battery[d] = m[3], battery[d] - 10
        else:
            battery[d] += 20
        steps.append(m)
    problem = f"""\
(define (problem hops-{n_steps}) (:domain drone-hops)
  (:objects {' '.join(DRONES)} - drone {' '.join(PADS)} - pad)
  (:init {init} (= (spent) 0))
  (:goal (and))
  (:constraints (and
    (always (and (>= (battery drone-1) 0) (<= (battery drone-1) 100)))
    (always (<= (spent) {SPEND_CEILING})))))
"""
    return problem, "".join("(" + " ".join(s) + ")\n" for s in steps)


class Oracle:
    """The reference library's validator on the same domain, problem and plan files."""

    def __init__(self, problem_text: str, plan_text: str) -> None:
        from unified_planning.engines import SequentialPlanValidator

        self.problem, self.plan, _ = oracle_read(DOMAIN, problem_text, plan_text)
        self.invariants = len(self.problem.state_invariants)
        self.validator = SequentialPlanValidator()
        # Its kind check refuses problems with trajectory constraints up front; with the
        # check skipped it reads them as state invariants (see tests/oracle/invariants.py).
        self.validator.skip_checks = True

    def validate(self) -> str:
        return oracle_verdict(self.validator, self.problem, self.plan)


def load(problem_text: str) -> Task:
    d = parse_domain(DOMAIN, "drone-hops.pddl")
    return Task(d, parse_problem(problem_text, d, "hops.pddl"))


# ---------------------------------------------------------------------------
# a: one 10,000-step plan


def bench_against_oracle(n_steps: int = 10_000, rounds: int = 3) -> None:
    problem_text, plan_text = walk(n_steps, SEED)
    task = load(problem_text)
    plan = read_plan(plan_text, "hops.plan")
    oracle = Oracle(problem_text, plan_text)
    best = dict.fromkeys(("cold", "warm", "both", "oracle"), float("inf"))
    for _ in range(rounds):
        t, v_cold = timed(lambda: ResourceCounter().check(task, plan), 3)
        best["cold"] = min(best["cold"], t)
        counter = ResourceCounter()
        counter.check(task, plan)  # compile the task and ground every distinct step once
        t, v = timed(lambda: counter.check(task, plan), 5)
        best["warm"] = min(best["warm"], t)
        sim = PlanSimulator()
        t, both = timed(lambda: (sim.check(task, plan), ResourceCounter().check(task, plan)), 3)
        best["both"] = min(best["both"], t)
        t, status = timed(oracle.validate, 1)
        best["oracle"] = min(best["oracle"], t)
    if not (v_cold.passed and v.passed and both[0].passed and both[1].passed):
        raise SystemExit("the walk should keep every bound and every precondition")
    if status != "valid":
        raise SystemExit(f"the oracle should accept the walk: {status}")
    assert len(plan) == n_steps and len(v.profiles) == 2
    per = 1 / n_steps
    t_cold, t_warm, t_both, t_oracle = (best[k] for k in ("cold", "warm", "both", "oracle"))
    print(f"plan: {n_steps} steps, {len(DRONES)} drones, {len(PADS)} pads (our own scenario), "
          f"seeded random walk, seed {SEED}")
    print(f"resources: {', '.join(p.resource for p in v.profiles)}; the oracle holds them as "
          f"{oracle.invariants} state invariants")
    print(f"verdicts: oracle {status}, ours {'pass' if v.passed else 'fail'}; best of {rounds} "
          f"interleaved rounds\n")
    row("ours: resource counter, cold", f"{fmt_s(t_cold)}  ({fmt_us(t_cold * per)}/step)")
    row("ours: resource counter, warm", f"{fmt_s(t_warm)}  ({fmt_us(t_warm * per)}/step)")
    row("ours: plan simulator + counter", f"{fmt_s(t_both)}  ({fmt_us(t_both * per)}/step)")
    row("oracle: validate with invariants", f"{fmt_s(t_oracle)}  ({fmt_us(t_oracle * per)}/step)")
    row("a. oracle / ours counter cold", f"{t_oracle / t_cold:.0f}x", ">= 50x",
        t_oracle / t_cold >= 50)
    row("   oracle / ours simulator + counter", f"{t_oracle / t_both:.0f}x", "(info)")
    row("   oracle / ours counter warm", f"{t_oracle / t_warm:.0f}x", "(info)")
    print_table(f"a. counting two resources over one {n_steps:,}-step plan")


# ---------------------------------------------------------------------------
# b: linear growth


def bench_growth(lengths=(2_500, 10_000, 40_000), rounds: int = 3) -> None:
    cases = {}
    for n in lengths:
        problem_text, plan_text = walk(n, SEED + n)
        cases[n] = (load(problem_text), read_plan(plan_text, "hops.plan"))
    best = {n: float("inf") for n in lengths}
    for _ in range(rounds):
        for n in lengths:
            task, plan = cases[n]
            t, v = timed(lambda: ResourceCounter().check(task, plan), 2)
            assert v.passed
            best[n] = min(best[n], t / n)
    print(f"b. linear growth (cold counter, best of {rounds} interleaved rounds)")
    for n in lengths:
        print(f"  {n:>7,} steps  {fmt_us(best[n])}/step")
    print()
    small, big = lengths[0], lengths[-1]
    growth = best[big] / best[small]
    # Linear means a flat per-step cost; 2x drift over a 16-fold length is our own allowance.
    row(f"per step at {big:,} / at {small:,}", f"{growth:.2f}x", "<= 2x (linear)", growth <= 2)
    print_table("b. linear growth: target")


def main() -> int:
    t0 = time.perf_counter()
    print(f"bench_resources  (python {sys.version.split()[0]}, {os.cpu_count()} cpus)\n")
    bench_against_oracle()
    bench_growth()
    print(f"total bench time {time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
