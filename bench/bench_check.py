"""Speed of checking one plan: against a reference library, a hand-written floor, and itself.

Every figure is measured in this run; nothing is compared with a stored number.

  a. a 3,000-step blocks-world plan: our plan simulator (cold and warm) against the
     ``unified_planning`` SequentialPlanValidator on the same files (the oracle, bench-only);
  b. the same plan against the Python floor: every step pre-ground by hand into
     (pre, add, del) frozensets and run by ``if pre <= s: s = (s - d) | a``;
  c. reading a ~1 MB generated logistics problem;
  d. per-step time at 1k, 10k and 100k steps (linear growth).

Timing: ``time.perf_counter``; garbage collection is off while a measurement runs
(as ``timeit`` does), for every contender alike; the best of several runs is kept.
"""

from __future__ import annotations

import gc
import os
import random
import sys
import time

from oracle_io import oracle_read, oracle_verdict

from plansieve.critics.model import Task
from plansieve.critics.pddl import parse_domain, parse_problem
from plansieve.critics.plan_text import read_plan
from plansieve.critics.simulator import PlanSimulator

SEED = 20240611
N_BLOCKS = 16

# Blocks world, four-operator version (pick-up, put-down, stack, unstack), untyped STRIPS.
# Source: IPC-2000 (AIPS-2000 planning competition), blocks track 1. Written from memory.
BLOCKS_DOMAIN = """\
(define (domain blocks)
  (:requirements :strips)
  (:predicates (on ?x ?y) (ontable ?x) (clear ?x) (handempty) (holding ?x))
  (:action pick-up
    :parameters (?x)
    :precondition (and (clear ?x) (ontable ?x) (handempty))
    :effect (and (not (ontable ?x)) (not (clear ?x)) (not (handempty)) (holding ?x)))
  (:action put-down
    :parameters (?x)
    :precondition (holding ?x)
    :effect (and (not (holding ?x)) (clear ?x) (handempty) (ontable ?x)))
  (:action stack
    :parameters (?x ?y)
    :precondition (and (holding ?x) (clear ?y))
    :effect (and (not (holding ?x)) (not (clear ?y)) (clear ?x) (handempty) (on ?x ?y)))
  (:action unstack
    :parameters (?x ?y)
    :precondition (and (on ?x ?y) (clear ?x) (handempty))
    :effect (and (holding ?x) (clear ?y) (not (clear ?x)) (not (handempty))
                 (not (on ?x ?y)))))
"""


# The same four operators as Python, for the hand-ground floor (b). Written from memory
# like the PDDL above; kept apart from it on purpose, so the floor owes nothing to our reader.
def _ground_blocks(step: tuple[str, ...]) -> tuple[frozenset, frozenset, frozenset]:
    """(pre, add, del) of one blocks-world step, ground by hand."""
    name, args = step[0], step[1:]
    if name == "pick-up":
        (x,) = args
        return (frozenset({("clear", x), ("ontable", x), ("handempty",)}),
                frozenset({("holding", x)}),
                frozenset({("ontable", x), ("clear", x), ("handempty",)}))
    if name == "put-down":
        (x,) = args
        return (frozenset({("holding", x)}),
                frozenset({("clear", x), ("handempty",), ("ontable", x)}),
                frozenset({("holding", x)}))
    if name == "stack":
        x, y = args
        return (frozenset({("holding", x), ("clear", y)}),
                frozenset({("clear", x), ("handempty",), ("on", x, y)}),
                frozenset({("holding", x), ("clear", y)}))
    if name == "unstack":
        x, y = args
        return (frozenset({("on", x, y), ("clear", x), ("handempty",)}),
                frozenset({("holding", x), ("clear", y)}),
                frozenset({("clear", x), ("handempty",), ("on", x, y)}))
    raise ValueError(name)


# ---------------------------------------------------------------------------
# A long valid plan: a seeded random walk over legal blocks-world moves.


class BlocksWalk:
    """A random initial arrangement, a walk of legal moves from it, and its final facts."""

    def __init__(self, n_blocks: int, n_steps: int, seed: int) -> None:
        rng = random.Random(seed)
        blocks = [f"b{i}" for i in range(1, n_blocks + 1)]
        order = blocks[:]
        rng.shuffle(order)
        # Ordered dicts as ordered sets, so the walk does not depend on string hashing.
        on: dict[str, str] = {}
        table: dict[str, None] = {}
        clear: dict[str, None] = {}
        below = None
        for b in order:
            if below is None or rng.random() < 0.35:
                table[b] = None
            else:
                on[b] = below
                clear.pop(below, None)
            clear[b] = None
            below = b
        self.blocks = blocks
        self.init = self._facts(on, table, clear, None)
        holding: str | None = None
        steps: list[tuple[str, ...]] = []
        for _ in range(n_steps):
            if holding is None:
                moves = [("pick-up", x) if x in table else ("unstack", x, on[x]) for x in clear]
            else:
                moves = [("put-down", holding)] + [("stack", holding, y) for y in clear]
            m = moves[rng.randrange(len(moves))]
            name, x = m[0], m[1]
            if name == "pick-up":
                del table[x], clear[x]
                holding = x
            elif name == "unstack":
                y = on.pop(x)
                del clear[x]
                clear[y] = None
                holding = x
            elif name == "put-down":
                table[x] = None
                clear[x] = None
                holding = None
            else:
                y = m[2]
                del clear[y]
                on[x] = y
                clear[x] = None
                holding = None
            steps.append(m)
        self.steps = steps
        self.final = self._facts(on, table, clear, holding)

    @staticmethod
    def _facts(on, table, clear, holding) -> list[tuple[str, ...]]:
        facts = [("on", x, y) for x, y in on.items()]
        facts += [("ontable", x) for x in table] + [("clear", x) for x in clear]
        facts.append(("handempty",) if holding is None else ("holding", holding))
        return facts

    def problem_text(self) -> str:
        """The problem: this walk's start, and every fact of its end as the goal."""
        def atom(f):
            return "(" + " ".join(f) + ")"
        return (f"(define (problem walk-{len(self.steps)}) (:domain blocks)\n"
                f"  (:objects {' '.join(self.blocks)})\n"
                f"  (:init {' '.join(atom(f) for f in self.init)})\n"
                f"  (:goal (and {' '.join(atom(f) for f in self.final)})))\n")

    def plan_text(self) -> str:
        return "".join("(" + " ".join(s) + ")\n" for s in self.steps)


# ---------------------------------------------------------------------------
# Timing helpers


def timed(fn, repeat: int) -> tuple[float, object]:
    """Best wall time of ``repeat`` calls of ``fn`` (gc off while timing), and its last result."""
    best = float("inf")
    out = None
    for _ in range(repeat):
        gc.collect()
        gc.disable()
        try:
            t0 = time.perf_counter()
            out = fn()
            dt = time.perf_counter() - t0
        finally:
            gc.enable()
        best = min(best, dt)
    return best, out


def hand_ground(steps) -> list[tuple[frozenset, frozenset, frozenset]]:
    """Every step ground by hand before timing; repeated steps share one grounding."""
    memo: dict = {}
    return [memo[s] if s in memo else memo.setdefault(s, _ground_blocks(s)) for s in steps]


def floor_run(init: frozenset, ground: list, goal: frozenset) -> bool:
    """The Python floor: plain frozenset algebra over pre-ground steps."""
    s = init
    for pre, a, d in ground:
        if pre <= s:
            s = (s - d) | a
        else:
            return False
    return goal <= s


def load_blocks(walk: BlocksWalk) -> tuple[Task, str, str]:
    d = parse_domain(BLOCKS_DOMAIN, "blocks-domain.pddl")
    problem_text = walk.problem_text()
    return Task(d, parse_problem(problem_text, d, "walk-problem.pddl")), problem_text, walk.plan_text()


def fmt_s(x: float) -> str:
    if x >= 1:
        return f"{x:.2f} s"
    if x >= 1e-3:
        return f"{x * 1e3:.1f} ms"
    return f"{x * 1e6:.0f} us"


def fmt_us(x: float) -> str:
    return f"{x * 1e6:.2f} us"


ROWS: list[tuple[str, str, str, str]] = []


def row(what: str, value: str, target: str = "", ok: bool | None = None) -> None:
    ROWS.append((what, value, target, "" if ok is None else ("PASS" if ok else "MISS")))


def print_table(title: str) -> None:
    head = ("measure", "value", "target", "")
    widths = [max(len(r[i]) for r in ROWS + [head]) for i in range(4)]
    print(title)
    line = "  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip()
    print(line)
    print("-" * len(line))
    for r in ROWS:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
    ROWS.clear()
    print()


# ---------------------------------------------------------------------------
# a + b: one 3,000-step plan, four contenders


def bench_against_references(n_steps: int = 3000, rounds: int = 3) -> None:
    walk = BlocksWalk(N_BLOCKS, n_steps, SEED)
    task, problem_text, plan_text = load_blocks(walk)
    oracle = Oracle(problem_text, plan_text)
    ground = hand_ground(walk.steps)
    init, goal = frozenset(walk.init), frozenset(walk.final)

    # Rounds interleave the contenders, so a busy spell on the machine hits them all alike.
    best = dict.fromkeys(("read", "cold", "warm", "floor", "oracle"), float("inf"))
    for _ in range(rounds):
        t, plan = timed(lambda: read_plan(plan_text, "walk.plan"), 2)
        best["read"] = min(best["read"], t)
        t, v_cold = timed(lambda: PlanSimulator().check(task, plan), 3)
        best["cold"] = min(best["cold"], t)
        sim = PlanSimulator()
        sim.check(task, plan)  # compile the task and ground every distinct step once
        t, v = timed(lambda: sim.check(task, plan), 5)
        best["warm"] = min(best["warm"], t)
        t, ok = timed(lambda: floor_run(init, ground, goal), 5)
        best["floor"] = min(best["floor"], t)
        t, oracle_status = timed(oracle.validate, 1)
        best["oracle"] = min(best["oracle"], t)
    if not (v_cold.passed and v.passed and ok):
        raise SystemExit(f"the walk should be valid: ours {v.passed}, floor {ok}")
    assert len(plan) == n_steps

    t_read, t_cold, t_warm, t_floor, t_oracle = (best[k] for k in
                                                 ("read", "cold", "warm", "floor", "oracle"))
    per = 1 / n_steps
    print(f"plan: {n_steps} steps, {N_BLOCKS} blocks (IPC-2000 4-operator blocks world, "
          f"domain written from memory), seeded random walk, seed {SEED}")
    print(f"verdicts: oracle {oracle_status}, ours {'valid' if v.passed else 'invalid'}, "
          f"floor {'valid' if ok else 'invalid'}; best of {rounds} interleaved rounds\n")
    row("ours: read plan text", f"{fmt_s(t_read)}  ({fmt_us(t_read * per)}/step)")
    row("ours: check, cold (fresh simulator)", f"{fmt_s(t_cold)}  ({fmt_us(t_cold * per)}/step)")
    row("ours: check, warm (task compiled)", f"{fmt_s(t_warm)}  ({fmt_us(t_warm * per)}/step)")
    row("oracle: read plan file", fmt_s(oracle.read_seconds))
    row("oracle: validate", f"{fmt_s(t_oracle)}  ({fmt_us(t_oracle * per)}/step)")
    row("floor: hand-ground set loop", f"{fmt_s(t_floor)}  ({fmt_us(t_floor * per)}/step)")
    row("a. oracle validate / ours check cold", f"{t_oracle / t_cold:.0f}x", ">= 100x",
        t_oracle / t_cold >= 100)
    row("   oracle validate / ours check warm", f"{t_oracle / t_warm:.0f}x", "(info)")
    row("   oracle read+validate / ours read+check cold",
        f"{(oracle.read_seconds + t_oracle) / (t_read + t_cold):.0f}x", "(info)")
    row("b. ours check warm / floor", f"{t_warm / t_floor:.2f}x", "<= 3x", t_warm / t_floor <= 3)
    row("   ours check cold / floor", f"{t_cold / t_floor:.2f}x", "(info)")
    print_table(f"a+b. validating one {n_steps}-step plan")


class Oracle:
    """The reference library's validator, reading the same domain, problem and plan files."""

    def __init__(self, problem_text: str, plan_text: str) -> None:
        from unified_planning.engines import SequentialPlanValidator

        self.problem, self.plan, self.read_seconds = oracle_read(
            BLOCKS_DOMAIN, problem_text, plan_text)
        self.validator = SequentialPlanValidator()

    def validate(self) -> str:
        return oracle_verdict(self.validator, self.problem, self.plan)


# ---------------------------------------------------------------------------
# c: reading a large problem

# Logistics, typed: packages move by truck within a city and by airplane between airports.
# Source: IPC-2000 (AIPS-2000 planning competition), logistics track. Written from memory.
LOGISTICS_DOMAIN = """\
(define (domain logistics)
  (:requirements :strips :typing)
  (:types truck airplane - vehicle
          package vehicle - physobj
          airport location - place
          city place physobj - object)
  (:predicates (in-city ?loc - place ?city - city)
               (at ?obj - physobj ?loc - place)
               (in ?pkg - package ?veh - vehicle))
  (:action load-truck
    :parameters (?pkg - package ?truck - truck ?loc - place)
    :precondition (and (at ?truck ?loc) (at ?pkg ?loc))
    :effect (and (not (at ?pkg ?loc)) (in ?pkg ?truck)))
  (:action load-airplane
    :parameters (?pkg - package ?airplane - airplane ?loc - place)
    :precondition (and (at ?pkg ?loc) (at ?airplane ?loc))
    :effect (and (not (at ?pkg ?loc)) (in ?pkg ?airplane)))
  (:action unload-truck
    :parameters (?pkg - package ?truck - truck ?loc - place)
    :precondition (and (at ?truck ?loc) (in ?pkg ?truck))
    :effect (and (not (in ?pkg ?truck)) (at ?pkg ?loc)))
  (:action unload-airplane
    :parameters (?pkg - package ?airplane - airplane ?loc - place)
    :precondition (and (in ?pkg ?airplane) (at ?airplane ?loc))
    :effect (and (not (in ?pkg ?airplane)) (at ?pkg ?loc)))
  (:action drive-truck
    :parameters (?truck - truck ?loc-from - place ?loc-to - place ?city - city)
    :precondition (and (at ?truck ?loc-from) (in-city ?loc-from ?city) (in-city ?loc-to ?city))
    :effect (and (not (at ?truck ?loc-from)) (at ?truck ?loc-to)))
  (:action fly-airplane
    :parameters (?airplane - airplane ?loc-from - airport ?loc-to - airport)
    :precondition (at ?airplane ?loc-from)
    :effect (and (not (at ?airplane ?loc-from)) (at ?airplane ?loc-to))))
"""


def logistics_problem(target_bytes: int, seed: int) -> str:
    """A logistics problem of about ``target_bytes``: many cities, vehicles and packages."""
    rng = random.Random(seed)
    n_cities = 300
    cities = [f"city{i}" for i in range(n_cities)]
    airports = [f"airport{i}" for i in range(n_cities)]
    places = [f"place{i}-{j}" for i in range(n_cities) for j in range(3)]
    trucks = [f"truck{i}" for i in range(n_cities)]
    planes = [f"plane{i}" for i in range(60)]
    init = [f"(in-city {airports[i]} {cities[i]})" for i in range(n_cities)]
    init += [f"(in-city {p} {cities[int(p[5:].split('-')[0])]})" for p in places]
    init += [f"(at {t} place{i}-0)" for i, t in enumerate(trucks)]
    init += [f"(at {pl} {rng.choice(airports)})" for pl in planes]
    head_size = sum(len(s) + 1 for s in init) + 30 * (n_cities * 6 + 60)
    # each package: one init fact, one goal fact, one object name (~70 bytes in all)
    n_packages = max(1, (target_bytes - head_size) // 70)
    packages = [f"package{i}" for i in range(n_packages)]
    all_places = airports + places
    init += [f"(at {pk} {rng.choice(all_places)})" for pk in packages]
    goal = [f"(at {pk} {rng.choice(all_places)})" for pk in packages]
    objects = (f"    {' '.join(cities)} - city\n    {' '.join(airports)} - airport\n"
               f"    {' '.join(places)} - location\n    {' '.join(trucks)} - truck\n"
               f"    {' '.join(planes)} - airplane\n    {' '.join(packages)} - package\n")
    return ("(define (problem big-logistics) (:domain logistics)\n  (:objects\n" + objects +
            "  )\n  (:init\n    " + "\n    ".join(init) + ")\n  (:goal (and\n    " +
            "\n    ".join(goal) + ")))\n")


def bench_parse(target_bytes: int = 1_000_000) -> None:
    text = logistics_problem(target_bytes, SEED)
    t_dom, dom = timed(lambda: parse_domain(LOGISTICS_DOMAIN, "logistics-domain.pddl"), 5)
    t_prob, prob = timed(lambda: parse_problem(text, dom, "big-logistics.pddl"), 3)
    size = len(LOGISTICS_DOMAIN.encode()) + len(text.encode())
    print(f"problem: {len(prob.objects)} objects, {len(prob.init)} init facts, "
          f"{len(text.encode()) / 1e6:.2f} MB; domain {len(LOGISTICS_DOMAIN.encode())} bytes "
          f"(IPC-2000 typed logistics, written from memory); together {size / 1e6:.2f} MB\n")
    row("parse_domain", fmt_s(t_dom))
    row("parse_problem (~1 MB)", fmt_s(t_prob), "< 1 s", t_prob < 1)
    row("parse_problem throughput", f"{len(text.encode()) / t_prob / 1e6:.2f} MB/s")
    print_table("c. reading a large problem file")


# ---------------------------------------------------------------------------
# d: linear growth


def bench_growth(lengths=(1_000, 10_000, 100_000), rounds: int = 3) -> None:
    cases = {}
    for n in lengths:
        walk = BlocksWalk(N_BLOCKS, n, SEED + n)
        task, _, plan_text = load_blocks(walk)
        plan = read_plan(plan_text, "walk.plan")
        sim = PlanSimulator()
        v = sim.check(task, plan)  # also warms ``sim`` for the warm runs
        assert v.passed, v.findings[:1]
        cases[n] = (walk, task, plan_text, plan, sim, hand_ground(walk.steps))
    names = ("read plan", "check cold", "check warm", "floor")
    best = {(n, k): float("inf") for n in lengths for k in names}
    # Rounds interleave the lengths, so a busy spell on the machine does not land on one.
    for _ in range(rounds):
        for n in lengths:
            walk, task, plan_text, plan, sim, ground = cases[n]
            init, goal = frozenset(walk.init), frozenset(walk.final)
            reps = 3 if n <= 10_000 else 1
            for k, fn in (("read plan", lambda: read_plan(plan_text, "walk.plan")),
                          ("check cold", lambda: PlanSimulator().check(task, plan)),
                          ("check warm", lambda: sim.check(task, plan)),
                          ("floor", lambda: floor_run(init, ground, goal))):
                t, _ = timed(fn, reps)
                best[n, k] = min(best[n, k], t / n)
    head = ["per step"] + [f"{n:,} steps" for n in lengths]
    table = [[k] + [fmt_us(best[n, k]) for n in lengths] for k in names]
    widths = [max(len(r[i]) for r in table + [head]) for i in range(len(head))]
    print(f"d. linear growth (blocks world, {N_BLOCKS} blocks, seeded walks, "
          f"best of {rounds} interleaved rounds)")
    for r in [head] + table:
        print("  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths))))
    print()
    small, big = lengths[0], lengths[-1]
    for k in ("check warm", "read plan", "floor"):
        growth = best[big, k] / best[small, k]
        # Linear means a flat per-step cost; 2x drift over a 100-fold length is our own allowance.
        row(f"{k}: per step at {big:,} / at {small:,}", f"{growth:.2f}x",
            "<= 2x (linear)" if k != "floor" else "(info)", growth <= 2 if k != "floor" else None)
    print_table("d. linear growth: targets")


def main() -> int:
    t0 = time.perf_counter()
    print(f"bench_check  (python {sys.version.split()[0]}, {os.cpu_count()} cpus)\n")
    bench_against_references()
    bench_parse()
    bench_growth()
    print(f"total bench time {time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
