"""Speed of the deadline checker on long timed plans: against a reference library, and itself.

Every figure is measured in this run; nothing is compared with a stored number.

  a. a timed plan of 2,000 durative actions (an invented courier scenario: vans
     drive between towns and hand over parcels while the towns are open, with
     ``over all`` conditions, fluents in durations and timed initial literals):
     our deadline checker (cold and warm) against the ``unified_planning``
     time-triggered plan validator on the same files (the oracle, bench-only);
  b. our time at three sizes, per happening and normalised by n log n (n = number
     of happenings), to show growth no worse than n log n.

Timing: ``time.perf_counter``; garbage collection is off while a measurement runs
(as ``timeit`` does), for every contender alike; the best of several runs is kept.
"""

from __future__ import annotations

import math
import os
import sys
import time
from pathlib import Path

from bench_check import fmt_s, fmt_us, print_table, row, timed
from oracle_io import oracle_read, oracle_verdict
from plansieve.critics.deadlines import DeadlineChecker
from plansieve.critics.model import Task
from plansieve.critics.pddl import parse_domain, parse_problem
from plansieve.critics.plan_text import read_plan

# An invented scenario (our own): courier vans between towns that open and close.
COURIER_DOMAIN = """\
(define (domain couriers)
  (:requirements :typing :durative-actions :fluents :timed-initial-literals)
  (:types van parcel town)
  (:predicates (at ?v - van ?t - town) (in ?p - parcel ?v - van)
               (handed ?p - parcel ?t - town) (open ?t - town))
  (:functions (road ?a ?b - town) (fuel ?v - van))
  (:durative-action drive
    :parameters (?v - van ?a ?b - town)
    :duration (= ?duration (road ?a ?b))
    :condition (and (at start (at ?v ?a)) (at start (>= (fuel ?v) (road ?a ?b))))
    :effect (and (at start (not (at ?v ?a))) (at start (decrease (fuel ?v) (road ?a ?b)))
                 (at end (at ?v ?b))))
  (:durative-action hand-over
    :parameters (?v - van ?p - parcel ?t - town)
    :duration (and (>= ?duration 1) (<= ?duration 2))
    :condition (and (at start (in ?p ?v)) (over all (at ?v ?t)) (over all (open ?t)))
    :effect (and (at start (not (in ?p ?v))) (at end (handed ?p ?t)))))
"""

N_TOWNS = 12
SIZES = (500, 2_000, 8_000)  # durative actions; the oracle runs at 2,000 only
ORACLE_SIZE = 2_000


def courier_case(n_actions: int) -> tuple[str, str]:
    """(problem text, plan text): vans alternate drive (2) and hand-over (1.5), in parallel.

    Each van makes 100 actions, so the plan has n_actions / 100 vans running at
    once, each van's actions back to back with a gap of 0.01 between them.
    """
    towns = [f"town{i}" for i in range(N_TOWNS)]
    n_vans = max(1, n_actions // 100)
    per_van = n_actions // n_vans
    vans = [f"van{i}" for i in range(n_vans)]
    parcels, init, goal, plan = [], [], [], []
    for i, v in enumerate(vans):
        here = i % N_TOWNS
        init.append(f"(at {v} {towns[here]})")
        init.append(f"(= (fuel {v}) {per_van * 2})")
        t = 0.0
        for k in range(per_van // 2):
            there = (here + 1 + k % 3) % N_TOWNS
            plan.append(f"{t:.3f}: (drive {v} {towns[here]} {towns[there]}) [2]")
            t += 2.01
            p = f"parcel{i}-{k}"
            parcels.append(p)
            init.append(f"(in {p} {v})")
            goal.append(f"(handed {p} {towns[there]})")
            plan.append(f"{t:.3f}: (hand-over {v} {p} {towns[there]}) [1.5]")
            t += 1.51
            here = there
    roads = [f"(= (road {a} {b}) 2)" for a in towns for b in towns]
    # every town opens at 0.001 and closes long after the plan: windows in play, never hit
    horizon = 10 + 3.52 * per_van
    tils = [f"(at 0.001 (open {t}))" for t in towns] + [f"(at {horizon:.0f} (not (open {t})))"
                                                         for t in towns]
    problem = ("(define (problem couriers-{n}) (:domain couriers)\n  (:objects "
               f"{' '.join(vans)} - van {' '.join(parcels)} - parcel {' '.join(towns)} - town)\n"
               f"  (:init {' '.join(init + roads + tils)})\n"
               f"  (:goal (and {' '.join(goal)})))\n").replace("{n}", str(n_actions))
    plan.sort(key=lambda line: float(line.split(":")[0]))
    return problem, "\n".join(plan) + "\n"


def load(problem_text: str) -> Task:
    d = parse_domain(COURIER_DOMAIN, "couriers-domain.pddl")
    return Task(d, parse_problem(problem_text, d, "couriers-problem.pddl"))


class Oracle:
    """The reference library's time-triggered validator on the same files."""

    def __init__(self, problem_text: str, plan_text: str) -> None:
        from unified_planning.engines import TimeTriggeredPlanValidator

        self.problem, self.plan, _ = oracle_read(COURIER_DOMAIN, problem_text, plan_text)
        self.validator = TimeTriggeredPlanValidator()

    def validate(self) -> str:
        return oracle_verdict(self.validator, self.problem, self.plan, reason=True)


def bench_against_oracle(rounds: int = 3) -> None:
    problem_text, plan_text = courier_case(ORACLE_SIZE)
    task = load(problem_text)
    plan = read_plan(plan_text, "couriers.plan")
    oracle = Oracle(problem_text, plan_text)
    best = dict.fromkeys(("cold", "warm", "oracle"), float("inf"))
    for _ in range(rounds):
        t, v_cold = timed(lambda: DeadlineChecker().check(task, plan), 2)
        best["cold"] = min(best["cold"], t)
        checker = DeadlineChecker()
        checker.check(task, plan)
        t, v = timed(lambda: checker.check(task, plan), 3)
        best["warm"] = min(best["warm"], t)
        t, status = timed(oracle.validate, 1)
        best["oracle"] = min(best["oracle"], t)
    if not (v.passed and v_cold.passed and status == "valid"):
        raise SystemExit(f"the plan should be valid: ours {[f.message for f in v.findings[:3]]}, "
                         f"oracle {status}")
    n = len(plan)
    print(f"plan: {n} durative actions ({2 * n} happenings, {n // 100} vans at once), "
          f"{2 * N_TOWNS} timed literals; invented courier scenario")
    print(f"verdicts: oracle {status}, ours {'valid' if v.passed else 'invalid'}; "
          f"best of {rounds} interleaved rounds\n")
    row("ours: check, cold (fresh checker)", f"{fmt_s(best['cold'])}  "
                                            f"({fmt_us(best['cold'] / n)}/action)")
    row("ours: check, warm (task compiled)", f"{fmt_s(best['warm'])}  "
                                            f"({fmt_us(best['warm'] / n)}/action)")
    row("oracle: validate", f"{fmt_s(best['oracle'])}  ({fmt_us(best['oracle'] / n)}/action)")
    ratio = best["oracle"] / best["cold"]
    row("a. oracle validate / ours check cold", f"{ratio:.0f}x", ">= 50x", ratio >= 50)
    row("   oracle validate / ours check warm", f"{best['oracle'] / best['warm']:.0f}x", "(info)")
    print_table(f"a. judging one timed plan of {n} durative actions")


def bench_growth(rounds: int = 3) -> None:
    cases = {}
    for n in SIZES:
        problem_text, plan_text = courier_case(n)
        task = load(problem_text)
        plan = read_plan(plan_text, "couriers.plan")
        checker = DeadlineChecker()
        v = checker.check(task, plan)
        assert v.passed, v.findings[:1]
        cases[n] = (task, plan, checker)
    best = {n: float("inf") for n in SIZES}
    for _ in range(rounds):
        for n in SIZES:
            task, plan, checker = cases[n]
            t, _ = timed(lambda: checker.check(task, plan), 2 if n <= 2_000 else 1)
            best[n] = min(best[n], t)
    print(f"b. growth (warm checker, best of {rounds} interleaved rounds; "
          f"n = happenings = 2 x actions)")
    head = ["", *[f"{n:,} actions" for n in SIZES]]
    per = ["per happening", *[fmt_us(best[n] / (2 * n)) for n in SIZES]]
    nlogn = ["time / (n log2 n)",
             *[f"{best[n] / (2 * n * math.log2(2 * n)) * 1e9:.1f} ns" for n in SIZES]]
    widths = [max(len(r[i]) for r in (head, per, nlogn)) for i in range(len(head))]
    for r in (head, per, nlogn):
        print("  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths))))
    print()
    small, big = SIZES[0], SIZES[-1]
    norm = [best[n] / (2 * n * math.log2(2 * n)) for n in (small, big)]
    growth = norm[1] / norm[0]
    # n log n or better means a flat or falling normalised cost; 1.5x drift over 16x sizes
    # is our own allowance for noise and cache effects.
    row(f"time/(n log n) at {big:,} / at {small:,}", f"{growth:.2f}x", "<= 1.5x", growth <= 1.5)
    print_table("b. growth: target")


def main() -> int:
    t0 = time.perf_counter()
    print(f"bench_deadlines  (python {sys.version.split()[0]}, {os.cpu_count()} cpus)\n")
    bench_against_oracle()
    bench_growth()
    print(f"total {time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).parent))
    raise SystemExit(main())
