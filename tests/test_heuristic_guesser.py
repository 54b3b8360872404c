"""The local heuristic guesser: its search, its error model, and its asyncio behaviour.

Sources, named beside each check:
- Plans are judged by our plan simulator AND by the ``unified_planning`` oracle
  (test-only; sequential validator via tests/oracle/reference.py, and its
  time-triggered validator for timed plans).
- Heuristic values: h_add as defined by Bonet & Geffner 2001 ("Planning as heuristic
  search", AIJ 129), checked against ``pyperplan``'s hAddHeuristic (test-only);
  h_FF's relaxed plan as defined by Hoffmann & Nebel 2001 (JAIR 14, sec. 4).
- Blocks world: Gupta & Nau 1992 ("On the complexity of blocks-world planning",
  AIJ 56): moving every misplaced block to the table and then building the goal
  towers is within twice the optimal length. Optimal lengths come from pyperplan's
  A* with LM-cut (admissible; Helmert & Domshlak 2009).
- Domains: the classic ones in tests/domains/classic (IPC, written from memory), the
  harbour demo (our own invention), the small benchmarks shipped inside the installed
  unified_planning package (tests/oracle/benchmarks.py; pyperplan 2.1 as installed
  ships no benchmark folder), and two invented durative domains written below.
"""

from __future__ import annotations

import asyncio
import functools
import random
import warnings
from fractions import Fraction
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydantic import ValidationError

from oracle import classic_cases, load_reference, shipped_benchmarks, shipped_cases
from plansieve.adapters import heuristic as heuristic_module
from plansieve.adapters.extract import extract_plan
from plansieve.adapters.guesser import Attempt, Guesser, GuesserFailed, GuessRequest
from plansieve.adapters.heuristic import HeuristicGuesser
from plansieve.adapters.mistakes import MistakeRates
from plansieve.adapters.search import Reachable, Relaxation, greedy_search
from plansieve.critics.model import Task
from plansieve.critics.pddl import load_task
from plansieve.critics.plan import Plan
from plansieve.critics.plan_text import read_plan
from plansieve.critics.simulator import PlanSimulator
from plansieve.critics.world import World

ROOT = Path(__file__).resolve().parent.parent
HARBOUR = (ROOT / "examples" / "harbour" / "domain.pddl", ROOT / "examples" / "harbour" / "problem.pddl")
CLASSIC = {c.name: c for c in classic_cases()}
SHIPPED = {c.name: c for c in shipped_cases()}
STRICT, THOROUGH = PlanSimulator(), PlanSimulator(keep_going=True)


@functools.lru_cache(maxsize=None)
def task_of(domain: Path, problem: Path) -> Task:
    return load_task(str(domain), str(problem))


def run(coro):
    return asyncio.run(coro)


def guess_text(guesser, task: Task, round_: int = 1, history=()) -> str:
    return run(guesser.guess(GuessRequest(task, round_, tuple(history)))).text


def steps_of(text: str):
    return extract_plan(text).plan.steps


def as_oracle_steps(steps):
    return [(s.action, s.args) for s in steps]


# ---------------------------------------------------------------------------
# Invented durative domains (our own scenarios), for timed plans

REED_DOMAIN = """
; Invented: survey drones over the Ostmark reed beds fly between masts and recharge.
(define (domain reed-survey)
  (:requirements :typing :durative-actions :numeric-fluents)
  (:types drone mast)
  (:predicates (docked ?d - drone ?m - mast) (surveyed ?m - mast) (charged ?d - drone)
               (link ?a ?b - mast))
  (:functions (distance ?a ?b - mast) (battery ?d - drone))
  (:durative-action fly
    :parameters (?d - drone ?a ?b - mast)
    :duration (= ?duration (distance ?a ?b))
    :condition (and (at start (docked ?d ?a)) (at start (link ?a ?b))
                    (at start (>= (battery ?d) (distance ?a ?b))))
    :effect (and (at start (not (docked ?d ?a))) (at end (docked ?d ?b))
                 (at end (decrease (battery ?d) (distance ?a ?b)))))
  (:durative-action survey
    :parameters (?d - drone ?m - mast)
    :duration (and (>= ?duration 2) (<= ?duration 5))
    :condition (and (over all (docked ?d ?m)) (at start (charged ?d)))
    :effect (at end (surveyed ?m)))
  (:durative-action recharge
    :parameters (?d - drone ?m - mast)
    :duration (= ?duration 4)
    :condition (over all (docked ?d ?m))
    :effect (and (at end (charged ?d)) (at end (assign (battery ?d) 10)))))
"""

REED_PROBLEM = """
(define (problem dawn-round) (:domain reed-survey)
  (:objects heron-2 - drone north-mast east-mast south-mast - mast)
  (:init (docked heron-2 north-mast) (link north-mast east-mast) (link east-mast south-mast)
         (link south-mast north-mast) (link east-mast north-mast)
         (= (distance north-mast east-mast) 3) (= (distance east-mast south-mast) 2.5)
         (= (distance south-mast north-mast) 4) (= (distance east-mast north-mast) 3)
         (= (battery heron-2) 4))
  (:goal (and (surveyed east-mast) (surveyed south-mast) (docked heron-2 north-mast))))
"""


@pytest.fixture(scope="module")
def reed(tmp_path_factory):
    folder = tmp_path_factory.mktemp("reed")
    (folder / "domain.pddl").write_text(REED_DOMAIN)
    (folder / "problem.pddl").write_text(REED_PROBLEM)
    return folder / "domain.pddl", folder / "problem.pddl"


def timed_oracle(domain: Path, problem: Path, plan_text: str, folder: Path):
    """The oracle's time-triggered validator on a timed plan file (checks run as in
    tests/oracle/reference.py: the library cannot establish support for numeric durations)."""
    import unified_planning.shortcuts as ups
    from unified_planning.engines.plan_validator import TimeTriggeredPlanValidator
    from unified_planning.engines import ValidationResultStatus
    from unified_planning.io import PDDLReader

    ups.get_environment().credits_stream = None
    path = folder / "plan.txt"
    path.write_text(plan_text)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reader = PDDLReader()
        problem_up = reader.parse_problem(str(domain), str(problem))
        validator = TimeTriggeredPlanValidator()
        validator.skip_checks = True
        result = validator.validate(problem_up, reader.parse_plan(problem_up, str(path)))
    return result.status == ValidationResultStatus.VALID


# ---------------------------------------------------------------------------
# 1. With no mistakes, every small problem is solved, and both judges agree


SOLVABLE = [(f"{name}-{p.stem}", c.domain, p) for name, c in CLASSIC.items() for p in c.problems]
SOLVABLE += [("harbour", *HARBOUR)]
SOLVABLE += [(f"{name}-{p.stem}", SHIPPED[name].domain, p)
             for name in ("depot", "miconic", "safe_road", "tpp_metric", "sailing")
             for p in SHIPPED[name].problems]
SOLVABLE += [("counters-problem", SHIPPED["counters"].domain, SHIPPED["counters"].problems[0])]
# Left out for time: citycar (the search takes seconds with h_FF; bench/bench_guesser.py
# runs it) and counters/problem2 (beyond the node limit, see test_node_limit_...).


@pytest.mark.parametrize("heuristic", ["ff", "add"])
@pytest.mark.parametrize("label,domain,problem", SOLVABLE, ids=[s[0] for s in SOLVABLE])
def test_clean_guess_is_valid(label, domain, problem, heuristic):
    task = task_of(domain, problem)
    text = guess_text(HeuristicGuesser(heuristic=heuristic, node_limit=20_000), task)
    plan = read_plan(text)  # the clean answer is a plain plan file
    # Source: our plan simulator, strict and keep-going alike.
    for sim in (STRICT, THOROUGH):
        v = sim.check(task, plan)
        assert v.passed, (label, v.codes(), text)
    # Source: the oracle (unified_planning 1.3.0 SequentialPlanValidator).
    oracle = load_reference(domain, problem).validate(as_oracle_steps(plan.steps))
    assert oracle.valid, (label, oracle.reason, text)


def test_safe_road_goal_holds_at_start_gives_empty_plan():
    # safe_road's goal is empty (tests/oracle/benchmarks.py): the empty plan is valid.
    case = SHIPPED["safe_road"]
    task = task_of(case.domain, case.problems[0])
    assert guess_text(HeuristicGuesser(), task) == ""
    assert load_reference(case.domain, case.problems[0]).validate([]).valid


def test_timed_plan_durations_and_separation(reed, tmp_path):
    domain, problem = reed
    task = task_of(domain, problem)
    text = guess_text(HeuristicGuesser(), task)
    plan = read_plan(text)
    assert plan.is_timed and len(plan) >= 5
    # Durations as the domain fixes them: fly lasts (distance ?a ?b) read in the state
    # before the step, survey takes its lower bound 2, recharge 4.
    # Source: PDDL2.1 (Fox & Long 2003), sec. 5: duration constraints.
    distance = {("north-mast", "east-mast"): 3, ("east-mast", "south-mast"): 2.5,
                ("south-mast", "north-mast"): 4, ("east-mast", "north-mast"): 3}
    for s in plan.steps:
        expected = {"fly": lambda: distance[s.args[1:]], "survey": lambda: 2,
                    "recharge": lambda: 4}[s.action]()
        assert s.duration == expected, s
    # Each step starts when the one before ends plus the separation 0.01 (PDDL2.1, sec. 8:
    # epsilon separation of dependent happenings).
    t = Fraction(0)
    for s in plan.steps:
        assert Fraction(repr(s.time)) == t, (s, t)
        t += Fraction(repr(s.duration)) + Fraction(1, 100)
    assert STRICT.check(task, plan).passed
    # Source: the oracle's TimeTriggeredPlanValidator (unified_planning 1.3.0).
    assert timed_oracle(domain, problem, text, tmp_path)


def test_timed_plan_on_shipped_durative_benchmark(tmp_path):
    # visit_precedence (durative, forall/or/not in conditions), shipped with unified_planning.
    root = shipped_benchmarks() / "visit_precedence"
    domain, problem = root / "domain.pddl", root / "problem.pddl"
    task = task_of(domain, problem)
    text = guess_text(HeuristicGuesser(), task)
    plan = read_plan(text)
    assert [s.duration for s in plan.steps] == [3, 3, 3]  # (= ?duration 3) in the domain
    assert STRICT.check(task, plan).passed
    # Source: the oracle's TimeTriggeredPlanValidator.
    assert timed_oracle(domain, problem, text, tmp_path)


def test_durative_task_needing_overlap_fails_honestly():
    # matchcellar (shipped with unified_planning): mending needs a match lit over all of it,
    # so no plan exists without overlapping actions; the guesser says so and names why.
    root = shipped_benchmarks() / "matchcellar"
    task = task_of(root / "domain.pddl", root / "problem.pddl")
    with pytest.raises(GuesserFailed) as err:
        guess_text(HeuristicGuesser(), task)
    assert "overlapping" in err.value.reason and err.value.guesser == "heuristic"


def test_node_limit_is_named_when_search_gives_up():
    # counters problem2 (12 counters, numeric goals) is beyond a small node limit.
    case = SHIPPED["counters"]
    task = task_of(case.domain, case.problems[1])
    guesser = HeuristicGuesser(node_limit=50)
    for _ in range(2):  # the failure is cached, and raised again
        with pytest.raises(GuesserFailed) as err:
            guess_text(guesser, task)
        assert "node limit of 50" in err.value.reason


# ---------------------------------------------------------------------------
# 2. The heuristics, against their definitions


@pytest.mark.parametrize("name", ["blocks", "gripper", "logistics"])
def test_h_add_matches_reference_and_ff_is_a_relaxed_plan(name):
    from pyperplan.heuristics.relaxation import hAddHeuristic, hMaxHeuristic
    from pyperplan.planner import _ground, _parse
    from pyperplan.search import searchspace

    case = CLASSIC[name]
    for problem in case.problems:
        task = task_of(case.domain, problem)
        reference = _ground(_parse(str(case.domain), str(problem)))
        h_add_ref, h_max_ref = hAddHeuristic(reference), hMaxHeuristic(reference)
        world = World(task)
        relax = Relaxation(Reachable(world))
        # states along a plan, so more than the initial state is compared
        plan = greedy_search(task, "add", seed=1).steps
        state = world.initial_state()
        for step in (None, *plan):
            if step is not None:
                for ga in world.resolve(step):
                    state.atoms -= ga.dels
                    state.atoms |= ga.adds
            ids = relax.state_ids(state.atoms)
            node = searchspace.make_root_node(
                frozenset("(" + " ".join(a) + ")" for a in state.atoms) & reference.facts)
            # Source: Bonet & Geffner 2001, h_add; the reference is pyperplan 2.1's hAddHeuristic.
            assert relax.h_add(ids) == h_add_ref(node), (problem.name, step)
            chosen = relax.relaxed_plan(ids)
            # Source: Hoffmann & Nebel 2001: a relaxed plan reaches the goal when deletes are
            # ignored, so its length is at least h_max (Bonet & Geffner 2001).
            reached, left = set(ids), set(chosen)
            while usable := {o for o in left if set(relax.pre[o]) <= reached}:
                for o in usable:
                    reached |= set(relax.adds[o])
                left -= usable
            assert not left and set(relax.goal) <= reached
            assert relax.h_ff(ids) >= h_max_ref(node)


# ---------------------------------------------------------------------------
# 3. Blocks world: the tower-building construction and optimal lengths


def tower_construction(init: dict[str, str], goal: dict[str, str]) -> list[tuple[str, tuple]]:
    """Gupta & Nau 1992's simple algorithm, in the 4-operator blocks world: put every
    misplaced block on the table, then build the goal towers bottom up.

    ``init`` and ``goal`` map a block to what it stands on ("table" or a block); a block
    missing from ``goal`` may end anywhere.
    """
    below = dict(init)
    plan: list[tuple[str, tuple]] = []

    def placed(x: str) -> bool:  # x and everything under it are where the goal wants them
        b = below[x]
        if x in goal and goal[x] != b:
            return False
        if b != "table" and any(goal.get(z) == b for z in goal if z != x):
            return False
        return b == "table" or placed(b)

    def clear(x: str) -> bool:
        return all(below[z] != x for z in below)

    moved = True
    while moved:
        moved = False
        for x in sorted(below):
            if below[x] != "table" and clear(x) and not placed(x):
                plan += [("unstack", (x, below[x])), ("put-down", (x,))]
                below[x] = "table"
                moved = True
    moved = True
    while moved:
        moved = False
        for x in sorted(goal):
            y = goal[x]
            if y != "table" and below[x] != y and clear(x) and clear(y) and placed(y):
                assert below[x] == "table"
                plan += [("pick-up", (x,)), ("stack", (x, y))]
                below[x] = y
                moved = True
    return plan


def blocks_problem(name: str, init: dict[str, str], goal: dict[str, str]) -> str:
    def facts(m):
        return " ".join(f"(ontable {x})" if y == "table" else f"(on {x} {y})"
                        for x, y in sorted(m.items()))
    clear = [x for x in init if all(init[z] != x for z in init)]
    return (f"(define (problem {name}) (:domain BLOCKS)\n (:objects {' '.join(sorted(init))} - block)\n"
            f" (:init (handempty) {facts(init)} {' '.join(f'(clear {x})' for x in sorted(clear))})\n"
            f" (:goal (and {facts(goal)})))\n")


def random_towers(blocks: list[str], rng: random.Random) -> dict[str, str]:
    order = blocks[:]
    rng.shuffle(order)
    out, last = {}, None
    for b in order:
        out[b] = "table" if last is None or rng.random() < 0.35 else last
        last = b
    return out


def blocks_instances(folder: Path):
    """The four classic files, and three seeded random instances of four to six blocks."""
    out = list(CLASSIC["blocks"].problems)
    rng = random.Random(1992)
    for i in range(3):
        blocks = [f"b{k}" for k in range(1, 4 + i + 1)]
        init, goal = random_towers(blocks, rng), random_towers(blocks, rng)
        path = folder / f"random-{i}.pddl"
        path.write_text(blocks_problem(f"random-{i}", init, goal))
        out.append(path)
    return out


def init_and_goal(task: Task) -> tuple[dict, dict]:
    init = {a[1]: a[2] for a in task.problem.init if a[0] == "on"}
    init.update({a[1]: "table" for a in task.problem.init if a[0] == "ontable"})
    goal = {}
    for g in World(task).goal:
        key = g.key
        goal[key[1]] = key[2] if key[0] == "on" else "table"
    return init, goal


def test_blocks_tower_construction_within_twice_optimal(tmp_path, record_property):
    from pyperplan.heuristics.lm_cut import LmCutHeuristic
    from pyperplan.planner import search_plan
    from pyperplan.search import astar_search

    domain = CLASSIC["blocks"].domain
    ratios = []
    for problem in blocks_instances(tmp_path):
        task = task_of(domain, problem)
        # Source: pyperplan 2.1, A* with LM-cut (admissible), so the length is optimal.
        optimal = len(search_plan(str(domain), str(problem), astar_search, LmCutHeuristic))
        simple = tower_construction(*init_and_goal(task))
        plan = Plan.of(*[(a, *args) for a, args in simple])
        assert STRICT.check(task, plan).passed, (problem.name, simple)
        assert load_reference(domain, problem).validate(simple).valid  # Source: the oracle
        # Source: Gupta & Nau 1992: every misplaced block must move at least once, and the
        # construction moves each at most twice.
        assert len(simple) <= 2 * optimal, (problem.name, len(simple), optimal)
        ours = read_plan(guess_text(HeuristicGuesser(), task))
        assert STRICT.check(task, ours).passed
        assert load_reference(domain, problem).validate(as_oracle_steps(ours.steps)).valid
        ratios.append(f"{problem.stem}: gbfs {len(ours)} / optimal {optimal}")
    # Not asserted: greedy search gives no length guarantee. Recorded for the report.
    record_property("gbfs_vs_optimal", "; ".join(ratios))


# ---------------------------------------------------------------------------
# 4. The error model


def test_mistake_rates_are_validated():
    assert MistakeRates().model_dump() == {"drop": 0.0, "swap": 0.0, "wrong_argument": 0.0,
                                           "invent": 0.0, "uptake": 1.0}
    for bad in ({"drop": -0.1}, {"swap": 1.5}, {"invent": float("nan")}, {"uptake": 2},
                {"wrong_argument": "often"}):
        with pytest.raises(ValidationError) as err:
            MistakeRates(**bad)
        assert next(iter(bad)) in str(err.value)
    with pytest.raises(ValidationError, match="typo"):
        MistakeRates(typo=0.1)
    with pytest.raises(ValidationError, match="less than or equal to 1"):
        MistakeRates(drop=1.01)


def test_guesser_settings_are_checked_and_described():
    g = HeuristicGuesser(heuristic="add", node_limit=10, seed=7,
                         mistakes=MistakeRates(drop=0.25), chatter=True)
    assert isinstance(g, Guesser) and g.name == "heuristic"
    assert g.describe() == {"heuristic": "add", "node_limit": 10, "seed": 7,
                            "mistakes": MistakeRates(drop=0.25).model_dump(), "chatter": True,
                            "separation": 0.01}
    for kwargs in ({"heuristic": "hmax"}, {"node_limit": 0}, {"seed": 1.5},
                   {"separation": 0}):
        with pytest.raises(ValueError):
            HeuristicGuesser(**kwargs)
    # rates may come as a plain dict (a configuration file), checked the same way
    assert HeuristicGuesser(mistakes={"invent": 0.5}).mistakes == MistakeRates(invent=0.5)
    with pytest.raises(ValidationError, match="invent"):
        HeuristicGuesser(mistakes={"invent": 5})


def harbour():
    return task_of(*HARBOUR)


def clean_steps(task: Task, seed: int):
    """The plan the search finds with this seed, before any mistake (the seed also breaks
    the search's ties, so each seed has its own correct plan)."""
    return steps_of(guess_text(HeuristicGuesser(seed=seed), task))


def is_subsequence(short, long) -> bool:
    it = iter(long)
    return all(any(x == y for y in it) for x in short)


SEEDS = range(12)


def codes_seen(task, rates, check_shape) -> set[str]:
    seen: set[str] = set()
    for seed in SEEDS:
        steps = steps_of(guess_text(HeuristicGuesser(seed=seed, mistakes=rates), task))
        check_shape(clean_steps(task, seed), steps)
        seen |= set(THOROUGH.check(task, Plan(steps)).codes())
    return seen


def test_dropped_steps():
    def shape(clean, steps):
        assert len(steps) <= len(clean) and is_subsequence(steps, clean)
    seen = codes_seen(harbour(), MistakeRates(drop=0.2), shape)
    # Source: PDDL 1.2 (McDermott et al. 1998): a plan missing a needed step fails a later
    # precondition or the goal; no other kind of finding can come of it.
    assert "precondition-false" in seen
    assert seen <= {"precondition-false", "goal-unmet", "fluent-undefined"}


def test_swapped_steps():
    def shape(clean, steps):
        assert sorted(steps, key=repr) == sorted(clean, key=repr)
        diff = [i for i, (a, b) in enumerate(zip(clean, steps)) if a != b]
        # differences come in adjacent pairs, each pair the two steps exchanged
        assert len(diff) % 2 == 0
        for i, j in zip(diff[::2], diff[1::2]):
            assert j == i + 1 and (steps[i], steps[j]) == (clean[j], clean[i])
    seen = codes_seen(harbour(), MistakeRates(swap=0.2), shape)
    # Source: PDDL 1.2: steps out of order fail a precondition (or leave the goal unmet).
    assert "precondition-false" in seen
    assert seen <= {"precondition-false", "goal-unmet", "fluent-undefined"}


def test_wrong_arguments():
    def shape(clean, steps):
        assert len(steps) == len(clean)
        for a, b in zip(clean, steps):
            assert a.action == b.action
            assert sum(x != y for x, y in zip(a.args, b.args)) <= 1
    seen = codes_seen(harbour(), MistakeRates(wrong_argument=0.2), shape)
    # Source: PDDL 1.2 typing: an object of another type fails the parameter's type; one
    # of the right type usually fails a precondition instead.
    assert {"argument-type", "precondition-false"} <= seen
    assert seen <= {"argument-type", "precondition-false", "goal-unmet", "fluent-undefined"}


def test_invented_steps():
    task = harbour()
    actions = set(task.domain.actions)

    def shape(clean, steps):
        assert len(steps) >= len(clean) and is_subsequence(clean, steps)
        for s in steps:
            # made up: an action the domain lacks, or a real one (with objects or made-up names)
            assert s.action not in actions or len(s.args) == len(task.domain.actions[s.action].params)
    seen = codes_seen(task, MistakeRates(invent=0.2), shape)
    # Source: PDDL 1.2: a step must name a declared action and declared objects.
    assert {"action-unknown", "object-unknown"} <= seen


def test_same_seed_same_text_different_seeds_differ():
    rates = MistakeRates(drop=0.1, swap=0.1, wrong_argument=0.1, invent=0.1)
    task = task_of(CLASSIC["logistics"].domain, CLASSIC["logistics"].problems[2])
    texts = [guess_text(HeuristicGuesser(seed=s, mistakes=rates, chatter=True), task)
             for s in range(6)]
    again = [guess_text(HeuristicGuesser(seed=s, mistakes=rates, chatter=True), task)
             for s in range(6)]
    assert texts == again
    assert len(set(texts)) == len(texts)


def play(guesser, task, detailed: bool, rounds: int):
    """A small hand loop: guess, check with the keep-going simulator, feed back."""
    history: list[Attempt] = []
    texts = []
    for r in range(1, rounds + 1):
        text = guess_text(guesser, task, r, history)
        texts.append(text)
        verdict = THOROUGH.check(task, extract_plan(text).plan)
        if verdict.passed:
            return r, texts
        history.append(Attempt(r, text, feedback="the plan does not pass",
                               findings=tuple(verdict.findings) if detailed else ()))
    return None, texts


def test_detailed_feedback_with_full_uptake_converges():
    rates = MistakeRates(drop=0.1, swap=0.1, wrong_argument=0.1, invent=0.1, uptake=1.0)
    for task in (harbour(), task_of(CLASSIC["logistics"].domain, CLASSIC["logistics"].problems[2])):
        for seed in range(6):
            solved_at, texts = play(HeuristicGuesser(seed=seed, mistakes=rates, chatter=True),
                                    task, detailed=True, rounds=8)
            # The design: each round with findings repairs at least one mistake; in these
            # runs the answer passes within a few rounds.
            assert solved_at is not None and solved_at <= 6, (seed, texts[-1])


def test_no_uptake_repeats_the_same_answer():
    rates = MistakeRates(drop=0.1, swap=0.1, wrong_argument=0.1, invent=0.1, uptake=0.0)
    solved_at, texts = play(HeuristicGuesser(seed=2, mistakes=rates), harbour(), True, 4)
    assert solved_at is None and len(set(texts)) == 1  # a planner repeats its errors


def test_terse_feedback_resamples():
    rates = MistakeRates(drop=0.1, swap=0.1, wrong_argument=0.1, invent=0.1)
    task = harbour()
    g = HeuristicGuesser(seed=4, mistakes=rates)
    first = guess_text(g, task)
    # Without findings the previous answer cannot be acted on: round 2 is a fresh draw,
    # whatever was answered before.
    a = guess_text(g, task, 2, [Attempt(1, first, "not valid")])
    b = guess_text(g, task, 2, [Attempt(1, "(something else)", "not valid")])
    assert a == b != first
    # A history this guesser did not write cannot be mapped onto its mistakes either.
    findings = tuple(THOROUGH.check(task, Plan.of("(lift carrier-7 crate-31 east-stack)")).findings)
    assert findings
    c = guess_text(g, task, 2, [Attempt(1, "(lift carrier-7 crate-31 east-stack)", "x", findings)])
    assert c == a


def test_detailed_feedback_beats_terse():
    # The point of the error model: with findings, mistakes get repaired; without, the
    # guesser can only try again. Over seeds, detailed needs fewer rounds.
    rates = MistakeRates(drop=0.08, swap=0.08, wrong_argument=0.08, invent=0.08)
    task = task_of(CLASSIC["logistics"].domain, CLASSIC["logistics"].problems[0])
    cap = 8
    detailed = [play(HeuristicGuesser(seed=s, mistakes=rates), task, True, cap)[0] or cap + 1
                for s in range(8)]
    terse = [play(HeuristicGuesser(seed=s, mistakes=rates), task, False, cap)[0] or cap + 1
             for s in range(8)]
    assert sum(detailed) < sum(terse), (detailed, terse)
    assert max(detailed) <= cap


def test_chatter_wraps_but_extraction_reads_the_same_plan(reed):
    task = task_of(*reed)
    rates = MistakeRates(drop=0.2, wrong_argument=0.2, invent=0.2)
    styles = set()
    for seed in range(8):
        quiet = guess_text(HeuristicGuesser(seed=seed, mistakes=rates), task)
        chatty = guess_text(HeuristicGuesser(seed=seed, mistakes=rates, chatter=True), task)
        assert chatty != quiet
        got = extract_plan(chatty)
        assert got.unread == () and got.plan.steps == read_plan(quiet).steps
        lines = chatty.splitlines()
        styles.add("fence" if "```pddl" in lines else "list" if any(
            line.startswith("1. ") for line in lines) else "plain")
    assert len(styles) >= 2


TASKS_FOR_PROPERTIES = [HARBOUR, (CLASSIC["blocks"].domain, CLASSIC["blocks"].problems[0])]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rates=st.builds(MistakeRates, drop=st.floats(0, 1), swap=st.floats(0, 1),
                       wrong_argument=st.floats(0, 1), invent=st.floats(0, 1),
                       uptake=st.floats(0, 1)),
       seed=st.integers(-2**31, 2**31), which=st.integers(0, 1), rounds=st.integers(1, 3),
       detailed=st.booleans(), chatter=st.booleans())
def test_any_rates_give_readable_text(rates, seed, which, rounds, detailed, chatter):
    task = task_of(*TASKS_FOR_PROPERTIES[which])
    g = HeuristicGuesser(seed=seed, mistakes=rates, chatter=chatter)
    history: list[Attempt] = []
    for r in range(1, rounds + 1):
        text = guess_text(g, task, r, history)
        got = extract_plan(text)
        assert got.unread == (), text  # the text always reads as a plan
        if not chatter:
            assert read_plan(text).steps == got.plan.steps
        verdict = THOROUGH.check(task, got.plan)
        history.append(Attempt(r, text, "x", tuple(verdict.findings) if detailed else ()))


# ---------------------------------------------------------------------------
# 5. Asyncio: many loops share one guesser


def test_concurrent_guesses_match_sequential_ones(reed, monkeypatch):
    rates = MistakeRates(drop=0.1, swap=0.1, wrong_argument=0.1, invent=0.1, uptake=0.5)
    tasks = [task_of(*HARBOUR), task_of(*reed),
             task_of(CLASSIC["blocks"].domain, CLASSIC["blocks"].problems[2]),
             task_of(CLASSIC["logistics"].domain, CLASSIC["logistics"].problems[1])]
    # Requests for rounds 1-3 with detailed histories, made by a reference guesser.
    reference = HeuristicGuesser(seed=5, mistakes=rates, chatter=True)
    requests = []
    for task in tasks:
        history: list[Attempt] = []
        for r in range(1, 4):
            requests.append(GuessRequest(task, r, tuple(history)))
            text = guess_text(reference, task, r, history)
            verdict = THOROUGH.check(task, extract_plan(text).plan)
            history.append(Attempt(r, text, "x", tuple(verdict.findings)))
    batch = [requests[i % len(requests)] for i in range(200)]

    sequential_guesser = HeuristicGuesser(seed=5, mistakes=rates, chatter=True)
    expected = [guess_text(sequential_guesser, req.task, req.round, req.history) for req in batch]

    searches = []
    real = heuristic_module.greedy_search

    def counting(task, *args):
        searches.append(id(task))
        return real(task, *args)

    monkeypatch.setattr(heuristic_module, "greedy_search", counting)
    shared = HeuristicGuesser(seed=5, mistakes=rates, chatter=True)

    async def all_at_once():
        return await asyncio.gather(*(shared.guess(req) for req in batch))

    got = run(all_at_once())
    assert [g.text for g in got] == expected
    assert sorted(searches) == sorted(id(t) for t in tasks)  # one search per task
    assert all(g.usage.cost == 0 and g.usage.output_tokens == len(g.text.split()) for g in got)
