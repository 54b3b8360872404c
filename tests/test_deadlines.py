"""Hand-worked examples for the happenings schedule and the deadline checker.

Every expected value below is worked out by hand from the published semantics,
named beside each check:

- Fox & Long, "PDDL2.1: An Extension to PDDL for Expressing Temporal Planning
  Domains", JAIR 20, 2003 ("PDDL2.1"): durative actions (sec. 5), the ordering of
  happenings, invariants over the open interval, duration constraints, the mutex
  ("no moving targets") rule and commuting additive effects (sec. 8).
- Edelkamp & Hoffmann, "PDDL2.2: The Language for the Classical Part of the 4th
  International Planning Competition", 2004 ("PDDL2.2"): timed initial literals.
- Gerevini & Long, "Plan Constraints and Preferences in PDDL3", 2005 ("PDDL3"):
  the trajectory semantics of each modal operator; definitions written from memory.

The scenarios (a pottery kiln, a harbour lamp, a parts courier) are our own.
"""

from __future__ import annotations

from fractions import Fraction

import pytest

from plansieve.critics.deadlines import DeadlineChecker
from plansieve.critics.errors import InputError
from plansieve.critics.happenings import schedule
from plansieve.critics.limits import attach_limits, parse_limits
from plansieve.critics.model import Task
from plansieve.critics.pddl import parse_domain, parse_problem
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.plan_text import read_plan
from plansieve.critics.simulator import PlanSimulator
from plansieve.critics.world import World

# ---------------------------------------------------------------------------
# A pottery kiln: ovens heat up, fire pots, cool down; staff are on site from 1 to 20.

KILN = """
(define (domain kiln)
  (:requirements :typing :durative-actions :fluents :timed-initial-literals
                 :negative-preconditions :duration-inequalities)
  (:types oven pot)
  (:predicates (raw ?p - pot) (fired ?p - pot) (glazed ?p - pot) (hot ?o - oven)
               (free ?o - oven) (staffed))
  (:functions (firing-time ?p - pot) (gas) (log-length))
  (:durative-action heat-up
    :parameters (?o - oven)
    :duration (= ?duration 2)
    :condition (and (at start (free ?o)) (at start (staffed)) (over all (staffed)))
    :effect (and (at end (hot ?o)) (at start (decrease (gas) ?duration))))
  (:durative-action fire
    :parameters (?o - oven ?p - pot)
    :duration (and (>= ?duration (firing-time ?p)) (<= ?duration (* 2 (firing-time ?p))))
    :condition (and (at start (hot ?o)) (at start (free ?o)) (at start (raw ?p))
                    (over all (hot ?o)) (over all (staffed)))
    :effect (and (at start (not (free ?o))) (at end (free ?o)) (at start (not (raw ?p)))
                 (at end (fired ?p))))
  (:durative-action cool
    :parameters (?o - oven)
    :duration (= ?duration 1)
    :condition (at start (hot ?o))
    :effect (at end (not (hot ?o))))
  (:durative-action write-log
    :parameters ()
    :duration (at end (<= ?duration (log-length)))
    :condition (at start (staffed))
    :effect (at end (increase (log-length) 1)))
  (:action glaze
    :parameters (?p - pot)
    :precondition (and (fired ?p) (staffed))
    :effect (glazed ?p)))
"""

KILN_P = """
(define (problem spring-batch) (:domain kiln)
  (:objects o1 o2 - oven a b - pot)
  (:init (free o1) (free o2) (raw a) (raw b)
         (= (firing-time a) 3) (= (firing-time b) 4) (= (gas) 10) (= (log-length) 2)
         (at 1 (staffed)) (at 20 (not (staffed))))
  (:goal (and (fired a) (fired b) (glazed a))))
"""

# Hand-worked valid plan (PDDL2.1 sec. 5): heat-up [1.5, 3.5] makes o1 hot; fire a
# [3.6, 6.6] lasts 3, inside [firing-time 3, 2 x 3]; fire b [6.7, 10.7] lasts 4, inside
# [4, 8]; glaze a at 10.8 (a fired at 6.6; staff on site 1 to 20). Happenings 0.1 apart.
GOOD = """\
1.5: (heat-up o1) [2]
3.6: (fire o1 a) [3]
6.7: (fire o1 b) [4]
10.8: (glaze a)
"""


def kiln(limits: str | None = None, problem: str = KILN_P) -> Task:
    d = parse_domain(KILN, "kiln.pddl")
    t = Task(d, parse_problem(problem, d, "kiln-p.pddl"))
    if limits is not None:
        t = attach_limits(t, parse_limits(limits, "kiln.toml"), "kiln.toml")
    return t


def judge(task: Task, plan_text: str, **kw):
    return DeadlineChecker(**kw).check(task, read_plan(plan_text, "kiln.plan"))


def only(verdict, code):
    got = [f for f in verdict.findings if f.code == code]
    assert len(got) == 1, [f.message for f in verdict.findings]
    return got[0]


# ---------------------------------------------------------------------------
# The schedule


def test_schedule_orders_happenings_by_time_then_part():
    # Source: PDDL2.1 sec. 5 (a durative step is a start happening at t and an end at
    # t + d); PDDL2.2 (a timed literal is a happening at its time). Equal times: ends,
    # literals, instantaneous steps, starts (our fixed order; see happenings.py).
    task = kiln()
    plan = read_plan("0: (write-log) [1]\n1: (heat-up o1) [2]\n1: (glaze a)\n", "p")
    got = [(h.time, h.step, h.part) for h in schedule(World(task), plan).happenings]
    assert got == [(0, 1, "start"), (1, 1, "end"), (1, None, "til"), (1, 3, "step"),
                   (1, 2, "start"), (3, 2, "end"), (20, None, "til")]


def test_schedule_exact_times_and_intervals():
    # Source: PDDL2.1 sec. 5: the end happening is at start + duration, exactly;
    # 0.1 + 0.2 = 0.3 as written (decimal plan times read as exact rationals).
    plan = Plan((PlanStep("heat-up", ("o1",), 0.1, 0.2),))
    s = schedule(World(kiln()), plan)
    assert s.intervals == {1: (Fraction(1, 10), Fraction(3, 10))}
    assert [h.time for h in s.happenings if h.step] == [Fraction(1, 10), Fraction(3, 10)]


def test_schedule_zero_duration_end_follows_its_start():
    # Source: PDDL2.1 sec. 5: a durative action's end never comes before its start.
    plan = Plan((PlanStep("write-log", (), 2, 0), PlanStep("heat-up", ("o1",), 2, 2)))
    parts = [(h.step, h.part) for h in schedule(World(kiln()), plan).happenings if h.step]
    assert parts == [(1, "start"), (2, "start"), (1, "end"), (2, "end")]


def test_schedule_problems_leave_steps_out():
    plan = Plan((PlanStep("heat-up", ("o1",), 0, None), PlanStep("bake", ("a",), 1),
                 PlanStep("glaze", ("a",), 2)))
    s = schedule(World(kiln()), plan)
    assert [p.code for p in s.problems] == ["duration-out-of-bounds", "action-unknown"]
    assert [p.step for p in s.problems] == [1, 2]
    assert [h.step for h in s.happenings if h.step] == [3]


def test_schedule_sequential_keeps_written_order():
    plan = Plan((PlanStep("glaze", ("a",)), PlanStep("heat-up", ("o1",), None, 2)))
    got = [(h.time, h.step, h.part) for h in schedule(World(kiln()), plan).happenings]
    assert got == [(None, 1, "step"), (None, 2, "start"), (None, 2, "end")]


def test_mixed_times_are_our_error():
    plan = Plan((PlanStep("glaze", ("a",), 1.0), PlanStep("glaze", ("b",))))
    with pytest.raises(InputError):
        DeadlineChecker().check(kiln(), plan)


# ---------------------------------------------------------------------------
# A valid plan, and one finding code at a time


def test_good_plan_passes_with_timeline():
    task = kiln('[[deadline]]\ncondition = "(fired b)"\nby = 12\n[time]\nmakespan = 11\n')
    v = judge(task, GOOD)
    assert v.passed, [f.message for f in v.findings]
    # fire b ends at 6.7 + 4 = 10.7; the last happening (glaze a) is at 10.8.
    assert [(e.what, e.deadline, e.reached_at, e.met) for e in v.timeline] == [
        ("(fired b)", 12.0, 10.7, True), ("makespan", 11.0, 10.8, True)]
    assert PlanSimulator().check(task, read_plan(GOOD, "p")).passed


def test_deadline_missed_says_how_late():
    # (fired b) first holds at 10.7; by 9.5 it is 10.7 - 9.5 = 1.2 late (exactly).
    v = judge(kiln('[[deadline]]\ncondition = "(fired b)"\nby = 9.5\n'), GOOD)
    f = only(v, "deadline-missed")
    assert (f.condition, f.deadline, f.reached_at, f.late_by) == ("(fired b)", 9.5, 10.7, 1.2)
    assert f.message == "(fired b) holds first at 10.7, 1.2 after its deadline 9.5"
    assert f.step == 3 and f.time == 10.7
    assert v.timeline[0].met is False


def test_deadline_never_reached():
    v = judge(kiln('[[deadline]]\ncondition = "(glazed b)"\nby = 30\n'), GOOD)
    f = only(v, "deadline-missed")
    assert f.reached_at is None and f.late_by is None and f.deadline == 30


def test_makespan_over():
    v = judge(kiln("[time]\nmakespan = 10\n"), GOOD)
    f = only(v, "makespan-over")
    assert (f.makespan, f.limit, f.excess) == (10.8, 10.0, pytest.approx(0.8))
    assert v.timeline[-1].met is False


def test_duration_below_a_fluent_bound():
    # Source: PDDL2.1 sec. 5.3: (>= ?duration (firing-time a)) reads the fluent when
    # the action starts: 3, so a duration of 2.5 is out of bounds, minimum 3.
    v = judge(kiln(), GOOD.replace("(fire o1 a) [3]", "(fire o1 a) [2.5]"))
    f = only(v, "duration-out-of-bounds")
    assert (f.step, f.duration, f.minimum, f.maximum) == (2, 2.5, 3.0, None)
    assert f.constraint == "(>= ?duration (firing-time a))"


def test_duration_above_an_upper_bound_and_at_end():
    # fire b may last at most 2 x 4 = 8; write-log's (at end (<= ?duration (log-length)))
    # is read when it ends (PDDL2.1 sec. 5.3): log-length is 2, so 3 is too long.
    plan = GOOD.replace("(fire o1 b) [4]", "(fire o1 b) [9]").replace(
        "10.8: (glaze a)", "15.8: (glaze a)\n16: (write-log) [3]")
    v = judge(kiln(), plan)
    got = sorted((f.step, f.maximum, f.time) for f in v.findings
                 if f.code == "duration-out-of-bounds")
    assert got == [(3, 8.0, 6.7), (5, 2.0, 19.0)]


def test_durations_missing_or_on_instant_steps():
    # A durative step needs a duration (PDDL2.1 sec. 5.3); a duration on an
    # instantaneous step is our own rule (see deadlines.py), [0] is accepted.
    v = judge(kiln(), GOOD.replace("(fire o1 b) [4]", "(fire o1 b)").replace(
        "10.8: (glaze a)", "10.8: (glaze a) [1]"))
    got = sorted((f.step, f.duration) for f in v.findings if f.code == "duration-out-of-bounds")
    assert got == [(3, None), (4, 1.0)]
    assert judge(kiln(), GOOD.replace("10.8: (glaze a)", "10.8: (glaze a) [0]")).passed


def test_invariant_broken_by_another_step():
    # Source: PDDL2.1 sec. 5: (over all (hot o1)) must hold in every state inside
    # (3.6, 6.6). cool o1 [4, 5] deletes (hot o1) at 5, inside: broken at 5.
    plan = GOOD.replace("6.7: (fire o1 b) [4]\n", "4: (cool o1) [1]\n")
    v = judge(kiln(problem=KILN_P.replace("(fired b) ", "")), plan)
    assert v.codes() == ["invariant-broken"]
    f = only(v, "invariant-broken")
    assert (f.step, f.condition, f.interval_start, f.interval_end, f.broken_at) == (
        2, "(hot o1)", 3.6, 6.6, 5.0)
    assert f.broken_by == "the end of (cool o1) at 5"


def test_invariant_may_fail_at_the_end_point():
    # Source: PDDL2.1 sec. 5: the interval is open, so deleting (hot o1) exactly when
    # fire a ends (6.6) breaks nothing; cool's end does not touch what fire's end reads.
    plan = GOOD.replace("6.7: (fire o1 b) [4]\n", "5.6: (cool o1) [1]\n").replace(
        "10.8: (glaze a)", "10.8: (glaze a)")
    v = judge(kiln(problem=KILN_P.replace("(fired b) ", "")), plan)
    assert v.passed, [f.message for f in v.findings]


def test_window_violated_at_start_and_while_running():
    # Source: PDDL2.2: (at 1 (staffed)) and (at 20 (not (staffed))) leave one window,
    # [1, 20). heat-up at 0.5 needs (staffed) at its start and over all: both outside.
    v = judge(kiln(), GOOD.replace("1.5: (heat-up o1)", "0.5: (heat-up o1)"))
    ws = [f for f in v.findings if f.code == "window-violated"]
    assert [(f.part, f.time) for f in ws] == [("start", 0.5), ("over-all", 0.5)]
    assert [(w.opens, w.closes) for w in ws[0].windows] == [(1.0, 20.0)]
    assert ws[0].message == ("(heat-up o1) needs (staffed) at its start at time 0.5, but timed "
                             "literals make it hold only from 1 to 20")
    assert "precondition-false" not in v.codes() and "invariant-broken" not in v.codes()


def test_window_violated_for_an_instant_step():
    v = judge(kiln(), GOOD.replace("10.8: (glaze a)", "20.5: (glaze a)"))
    f = only(v, "window-violated")
    assert (f.part, f.step, f.time, f.condition) == ("step", 4, 20.5, "(staffed)")


def test_false_condition_inside_a_window_is_a_plain_precondition():
    # o2 is never heated: (hot o2) has no timed literal, so it is a plain false condition,
    # reported with its part and time (PDDL2.1 sec. 5: read before the start happening).
    v = judge(kiln(), GOOD.replace("(fire o1 b)", "(fire o2 b)"))
    f = only(v, "precondition-false")
    assert (f.step, f.part, f.time, f.condition) == (3, "start", 6.7, "(hot o2)")
    assert f.message == "(fire o2 b) at its start (time 6.7) needs (hot o2), which does not hold"


def test_goal_unmet_when_the_plan_ends():
    v = judge(kiln(), GOOD.replace("10.8: (glaze a)\n", ""))
    f = only(v, "goal-unmet")
    assert f.condition == "(glazed a)" and f.time == 10.7


def test_interfering_happenings_at_one_time():
    # Source: PDDL2.1 sec. 8 (mutex rule): heat-up's end adds (hot o1) at 3.5 and fire's
    # start reads it at 3.5: they may not share a time. Ends come first, so the condition
    # itself holds: the only finding is the closeness.
    v = judge(kiln(), GOOD.replace("3.6: (fire o1 a)", "3.5: (fire o1 a)"))
    f = only(v, "happenings-too-close")
    assert (f.step, f.other_step, f.gap, f.tolerance, f.shared) == (2, 1, 0.0, 0.001, "(hot o1)")
    assert v.codes() == ["happenings-too-close"]


def test_tolerance_from_limits_and_constructor():
    # 3.5005 - 3.5 = 0.0005: too close for the default 0.001 (common practice), fine
    # for 0.0001; the constructor wins over the limits file.
    plan = GOOD.replace("3.6: (fire o1 a)", "3.5005: (fire o1 a)")
    assert only(judge(kiln(), plan), "happenings-too-close").gap == pytest.approx(0.0005)
    assert judge(kiln("[time]\ntolerance = 0.0001\n"), plan).passed
    assert not judge(kiln("[time]\ntolerance = 0.0001\n"), plan, tolerance=0.01).passed
    assert judge(kiln(), plan, tolerance=0.0001).passed


def test_simultaneous_additive_effects_commute():
    # Source: PDDL2.1 sec. 8: two decreases of (gas) at one time commute, so two ovens
    # may start heating together; gas goes 10 - 2 - 2 = 6 (?duration read in an effect).
    plan = ("1.5: (heat-up o1) [2]\n1.5: (heat-up o2) [2]\n3.6: (fire o1 a) [3]\n"
            "3.6: (fire o2 b) [4]\n7.7: (glaze a)\n")
    problem = KILN_P.replace("(:goal", "(:constraints (and (sometime (= (gas) 6)) "
                                       "(always (>= (gas) 6))))\n  (:goal")
    v = judge(kiln(problem=problem), plan)
    assert v.passed, [f.message for f in v.findings]
    v = judge(kiln(problem=problem.replace("(sometime (= (gas) 6))", "(sometime (= (gas) 5))")),
              plan)
    assert only(v, "constraint-violated").operator == "sometime"


def test_same_atom_added_twice_is_no_interference():
    # Source: PDDL2.1 sec. 8: only contradicting effects, or an effect on what the other
    # reads, interfere; two steps adding the same fact at one time do not.
    assert judge(kiln(), GOOD.replace("10.8: (glaze a)", "10.8: (glaze a)\n10.8: (glaze a)")).passed
    # ...but one that reads what the other adds at the same time does: glaze a at 6.6
    # reads (fired a), which fire a's end adds at 6.6.
    v = judge(kiln(), GOOD.replace("10.8: (glaze a)", "6.6: (glaze a)"))
    assert only(v, "happenings-too-close").shared == "(fired a)"


def test_literals_after_the_plan_ends_do_not_count():
    # Our reading (see deadlines.py): the goal is read when the plan ends, at 10.8;
    # the literal at 20 comes later. A goal of (staffed) is met at 10.8.
    problem = KILN_P.replace("(:goal (and (fired a)", "(:goal (and (staffed) (fired a)")
    assert judge(kiln(problem=problem), GOOD).passed
    assert PlanSimulator().check(kiln(problem=problem), read_plan(GOOD, "p")).passed


# ---------------------------------------------------------------------------
# PDDL3 trajectory constraints, hand-worked on a sequential plan (times = step numbers)

LAMP = """
(define (domain harbour-lamp)
  (:requirements :strips :typing :constraints :numeric-fluents)
  (:types lamp)
  (:predicates (lit ?l - lamp) (fuelled ?l - lamp) (logged))
  (:functions (oil))
  (:action light :parameters (?l - lamp) :precondition (fuelled ?l) :effect (lit ?l))
  (:action douse :parameters (?l - lamp) :effect (not (lit ?l)))
  (:action fill :parameters (?l - lamp) :effect (and (fuelled ?l) (increase (oil) 2)))
  (:action note :parameters () :effect (logged)))
"""


def lamp(constraints: str, goal: str = "(and)") -> Task:
    d = parse_domain(LAMP, "lamp.pddl")
    p = parse_problem(f"""(define (problem night) (:domain harbour-lamp)
      (:objects north south - lamp) (:init (= (oil) 0))
      (:constraints {constraints}) (:goal {goal}))""", d, "night.pddl")
    return Task(d, p)


# S0 (time 0): nothing. fill north -> S1 (1); light north -> S2 (2); note -> S3 (3);
# douse north -> S4 (4); light north -> S5 (5).
NIGHT = Plan.of("(fill north)", "(light north)", "(note)", "(douse north)", "(light north)")


def violation(constraints: str, plan: Plan = NIGHT):
    v = DeadlineChecker().check(lamp(constraints), plan)
    return [(f.code, f.operator if f.code == "constraint-violated" else None, f.time, f.step)
            for f in v.findings]


@pytest.mark.parametrize("constraint, expected", [
    # Source: PDDL3, (always φ): φ in every state. S0 has (lit north) false.
    ("(always (lit north))", [("constraint-violated", "always", 0.0, None)]),
    ("(always (not (lit south)))", []),
    # (sometime φ): some state. (lit north) holds in S2.
    ("(sometime (lit north))", []),
    ("(sometime (lit south))", [("constraint-violated", "sometime", None, None)]),
    # (at end φ): the last state S5.
    ("(at end (lit north))", []),
    ("(at end (not (lit north)))", [("constraint-violated", "at-end", 5.0, 5)]),
    # (at-most-once φ): (lit north) holds S2-S3, false S4, true again S5.
    ("(at-most-once (lit north))", [("constraint-violated", "at-most-once", 5.0, 5)]),
    ("(at-most-once (logged))", []),
    # (sometime-before φ ψ): every φ-state has an earlier ψ-state. (fuelled north) is
    # in S1, before (lit north) in S2. (logged) comes only in S3, after S2.
    ("(sometime-before (lit north) (fuelled north))", []),
    ("(sometime-before (lit north) (logged))", [("constraint-violated", "sometime-before", 2.0, 2)]),
    # (sometime-after φ ψ): every φ-state has ψ in it or later. (logged) holds from S3
    # on, after the (lit north) state S2 and with S5. (not (lit north)) follows S2 at
    # S4, but nothing follows the last (lit north) state, S5.
    ("(sometime-after (lit north) (logged))", []),
    ("(sometime-after (lit north) (not (lit north)))",
     [("constraint-violated", "sometime-after", 5.0, 5)]),
    # (within t φ): φ in a state stamped <= t. (logged) first holds at 3.
    ("(within 3 (logged))", []),
    ("(within 2 (logged))", [("deadline-missed", None, 3.0, 3)]),
    # (always-within t φ ψ): (lit north) at 2 needs (logged) by 2 + t: at 3 with t = 1.
    ("(always-within 1 (lit north) (logged))", []),
    ("(always-within 1 (fuelled north) (logged))",
     [("constraint-violated", "always-within", 1.0, 1)]),
    # (hold-during t1 t2 φ): states in effect in [t1, t2). (fuelled north) from S1 on.
    ("(hold-during 1 4 (fuelled north))", []),
    ("(hold-during 2 4 (lit north))", []),  # S2, S3: lit; S4 (time 4) is outside
    ("(hold-during 2 5 (lit north))", [("constraint-violated", "hold-during", 4.0, 4)]),
    # Our stricter reading (trajectory.py): the state in effect at t1 = 1.5 is S1
    # (stamped 1), where (lit north) is false — the paper's quantifier only sees S2, S3.
    ("(hold-during 1.5 4 (lit north))", [("constraint-violated", "hold-during", 1.0, 1)]),
    # (hold-after t φ): every state in effect after t. Our reading again: S0 is in
    # effect on (0, 1), so (fuelled north), true from S1 on, fails right after 0; the
    # paper's quantifier (states stamped after 0) would see only S1-S5.
    ("(hold-after 0 (fuelled north))", [("constraint-violated", "hold-after", 0.0, None)]),
    ("(hold-after 1 (fuelled north))", []),
    ("(hold-after 2 (lit north))", [("constraint-violated", "hold-after", 4.0, 4)]),
])
def test_trajectory_operator(constraint, expected):
    assert violation(constraint) == expected


def test_forall_expands_and_preferences_are_skipped():
    # Source: PDDL3: a forall over constraints is one constraint per object; preferences
    # are soft and never make a plan invalid.
    got = violation("(forall (?l - lamp) (sometime (lit ?l)))")
    assert got == [("constraint-violated", "sometime", None, None)]
    assert violation("(preference late (within 1 (logged)))") == []


def test_resource_bounds_are_left_to_the_resource_counter():
    # The resource counter's kind: (always (<= (oil) 1)) on one fluent. Only the
    # other part of an (always (and ...)) is ours: (lit north) fails in S0.
    assert violation("(always (<= (oil) 1))") == []
    assert violation("(always (and (<= (oil) 1) (lit north)))") == [
        ("constraint-violated", "always", 0.0, None)]
    # a comparison of two fluents is not a simple bound: ours
    assert violation("(always (<= (oil) (oil)))") == []


def test_untimed_plan_without_temporal_side_passes():
    d = parse_domain(LAMP, "lamp.pddl")
    t = Task(d, parse_problem("(define (problem p) (:domain harbour-lamp) (:objects n - lamp)"
                              "(:init (= (oil) 0)) (:goal (lit n)))", d))
    v = DeadlineChecker().check(t, Plan.of("(light n)"))
    assert v.passed and v.findings == [] and v.timeline == []


# ---------------------------------------------------------------------------
# Sequential plans read on a clock fluent

COURIER = """
(define (domain parts-courier)
  (:requirements :typing :numeric-fluents)
  (:types kit place)
  (:predicates (at-van ?p - place) (carrying ?k - kit) (delivered ?k - kit))
  (:functions (clock) (drive-time ?a ?b - place))
  (:action drive :parameters (?a ?b - place)
    :precondition (at-van ?a)
    :effect (and (not (at-van ?a)) (at-van ?b) (increase (clock) (drive-time ?a ?b))))
  (:action pick :parameters (?k - kit) :effect (and (carrying ?k) (increase (clock) 0.5)))
  (:action drop :parameters (?k - kit)
    :precondition (carrying ?k)
    :effect (and (delivered ?k) (not (carrying ?k)) (increase (clock) 0.5))))
"""


def courier(limits: str) -> Task:
    d = parse_domain(COURIER, "courier.pddl")
    p = parse_problem("""(define (problem run) (:domain parts-courier)
      (:objects kit3 - kit yard mill - place)
      (:init (at-van yard) (= (clock) 0) (= (drive-time yard mill) 16))
      (:goal (delivered kit3)))""", d, "run.pddl")
    return attach_limits(Task(d, p), parse_limits(limits, "run.toml"), "run.toml")


def test_deadline_on_a_clock():
    # pick (0.5) + drive (16) + drop (0.5): (delivered kit3) first holds at clock 17,
    # 17 - 14.5 = 2.5 after its deadline (the issue's own example numbers).
    task = courier('[[deadline]]\ncondition = "(delivered kit3)"\nby = 14.5\n'
                   '[time]\nclock = "(clock)"\nmakespan = 20\n')
    v = DeadlineChecker().check(task, Plan.of("(pick kit3)", "(drive yard mill)",
                                              "(drop kit3)"))
    f = only(v, "deadline-missed")
    assert (f.reached_at, f.late_by, f.clock, f.step) == (17.0, 2.5, "(clock)", 3)
    assert f.message == ("(delivered kit3) holds first at 17, 2.5 after its deadline 14.5 "
                         "on the clock (clock)")
    assert [(e.what, e.met) for e in v.timeline] == [("(delivered kit3)", False),
                                                     ("makespan", True)]


def test_sequential_plan_without_clock_counts_steps():
    # PDDL3 reads a sequential plan's states as stamped 0, 1, 2, ... (from memory);
    # the makespan of a sequential plan is its number of steps (PDDL2.1 total-time).
    task = courier('[[deadline]]\ncondition = "(delivered kit3)"\nby = 3\n'
                   '[time]\nmakespan = 2\n')
    v = DeadlineChecker().check(task, Plan.of("(pick kit3)", "(drive yard mill)",
                                              "(drop kit3)"))
    assert v.codes() == ["makespan-over"]
    assert [(e.reached_at, e.met) for e in v.timeline] == [(3.0, True), (3.0, False)]


# ---------------------------------------------------------------------------
# The plan simulator on timed plans


def test_simulator_runs_a_timed_plan_in_time_order():
    # Source: PDDL2.1 sec. 5: happenings are applied in time order, whatever the order
    # the plan file lists them in. Written backwards, GOOD still runs.
    backwards = "".join(reversed(GOOD.splitlines(keepends=True)))
    v = PlanSimulator().check(kiln(), read_plan(backwards, "p"))
    assert v.passed, [f.message for f in v.findings]
    # glaze a at 5 comes before fire a ends (6.6): (fired a) does not hold yet.
    v = PlanSimulator().check(kiln(), read_plan(GOOD.replace("10.8: (glaze a)", "5: (glaze a)"),
                                                "p"))
    assert [(f.code, f.step, f.time, f.condition) for f in v.findings] == [
        ("precondition-false", 4, 5.0, "(fired a)")]


def test_simulator_reads_durations_into_effects():
    # ?duration in an effect (PDDL2.1 sec. 5.3): heat-up [2] burns 2 gas. Untimed, with a
    # duration given, the same; with none, a finding instead of a guess.
    task = kiln(problem=KILN_P.replace("(:goal (and (fired a) (fired b) (glazed a)))",
                                       "(:goal (= (gas) 8))"))
    assert PlanSimulator().check(task, read_plan("0: (heat-up o1) [2]\n", "p")).codes() == [
        "precondition-false"]  # (staffed) only from 1
    assert PlanSimulator().check(task, read_plan("1: (heat-up o1) [2]\n", "p")).passed
    assert PlanSimulator().check(task, Plan((PlanStep("heat-up", ("o1",), None, 2),))).codes() \
        == ["precondition-false"]  # untimed: no timed literals, so never staffed
    v = PlanSimulator().check(task, Plan.of("(heat-up o1)"))
    assert v.codes() == ["duration-out-of-bounds"] and v.findings[0].duration is None


def test_windows_from_several_literals():
    # Source: PDDL2.2: each literal sets its fact at its time. Our orchard problem opens
    # the hilltop at 5, closes it at 11 and opens it again at 16: windows [5, 11), [16, ...).
    from pathlib import Path

    from plansieve.critics.happenings import timed_literals
    from plansieve.critics.pddl import load_task
    from plansieve.critics.windows import Windows, describe

    here = Path(__file__).parent / "domains" / "temporal" / "orchard"
    task = load_task(here / "domain.pddl", here / "p01.pddl")
    w = Windows(task.problem.init, timed_literals(World(task)))
    got = w.windows(("open", "hilltop"))
    assert [(x.opens, x.closes) for x in got] == [(5.0, 11.0), (16.0, None)]
    assert describe(got) == "from 5 to 11 and from 16 on"
    assert [(x.opens, x.closes) for x in w.windows(("open", "east-rows"))] == [(None, 9.0)]
    assert [(x.opens, x.closes) for x in w.windows(("open", "hilltop"), False)] == [
        (None, 5.0), (11.0, 16.0)]
    # at 11 exactly: the literal has happened for a start, not yet for an end
    assert w.value_at(("open", "hilltop"), 11, literals_at_t=True) is False
    assert w.value_at(("open", "hilltop"), 11, literals_at_t=False) is True


def test_a_preference_in_a_durative_condition_is_soft_for_every_critic():
    # Source: PDDL3 (Gerevini & Long 2005): preferences are soft; violating one never
    # makes a plan invalid, it only costs in the metric. Written from memory.
    from plansieve.critics.check import check as check_all
    from plansieve.critics.select import critics_for
    d = parse_domain("""(define (domain kiln-soft)
      (:requirements :durative-actions :preferences)
      (:predicates (cool) (fired))
      (:durative-action fire :parameters () :duration (= ?duration 3)
        :condition (and (at start (preference gentle (cool))))
        :effect (at end (fired))))""")
    p = parse_problem("(define (problem p) (:domain kiln-soft) (:goal (fired)))", d)
    t = Task(d, p)
    result = check_all(t, read_plan("0: (fire) [3]\n"), critics_for(t))
    assert result.passed, result.findings
