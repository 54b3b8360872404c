"""Hand-worked examples for the plan simulator, each with the exact findings expected.

Semantics sources, named beside each check:
- McDermott et al., "PDDL — The Planning Domain Definition Language", 1998 (PDDL 1.2 manual):
  STRIPS/ADL action semantics, conditional effects, quantifiers, typing.
- Fox & Long, "PDDL2.1: An Extension to PDDL for Expressing Temporal Planning Domains",
  JAIR 20, 2003: numeric fluents, simultaneous numeric effects, undefined values.
- Fikes & Nilsson 1971 (STRIPS): the successor state is (s - del) | add.
"""

from __future__ import annotations

import pytest

from plansieve.critics.pddl import parse_domain, parse_problem
from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.simulator import PlanSimulator

# IPC-2000 blocks world, 4-operator version, written from memory.
BLOCKS = """
(define (domain blocks)
  (:requirements :strips)
  (:predicates (on ?x ?y) (ontable ?x) (clear ?x) (handempty) (holding ?x))
  (:action pick-up :parameters (?x)
    :precondition (and (clear ?x) (ontable ?x) (handempty))
    :effect (and (not (ontable ?x)) (not (clear ?x)) (not (handempty)) (holding ?x)))
  (:action put-down :parameters (?x)
    :precondition (holding ?x)
    :effect (and (not (holding ?x)) (clear ?x) (handempty) (ontable ?x)))
  (:action stack :parameters (?x ?y)
    :precondition (and (holding ?x) (clear ?y))
    :effect (and (not (holding ?x)) (not (clear ?y)) (clear ?x) (handempty) (on ?x ?y)))
  (:action unstack :parameters (?x ?y)
    :precondition (and (on ?x ?y) (clear ?x) (handempty))
    :effect (and (holding ?x) (clear ?y) (not (clear ?x)) (not (handempty)) (not (on ?x ?y)))))
"""

BLOCKS_P = """
(define (problem three) (:domain blocks)
  (:objects a b c)
  (:init (clear a) (clear b) (clear c) (ontable a) (ontable b) (ontable c) (handempty))
  (:goal (and (on a b) (on b c))))
"""


def task(domain: str, problem: str) -> Task:
    d = parse_domain(domain)
    return Task(d, parse_problem(problem, d))


def run(t: Task, *steps: str, keep_going: bool = False):
    return PlanSimulator(keep_going=keep_going).check(t, Plan.of(*steps))


def test_blocks_tower_is_valid():
    # Worked example: the optimal 4-step plan for building a-b-c from three table blocks.
    v = run(task(BLOCKS, BLOCKS_P), "(pick-up b)", "(stack b c)", "(pick-up a)", "(stack a b)")
    assert v.passed and v.findings == [] and v.steps_checked == 4
    assert (v.critic, v.sound) == ("plan-simulator", True)


def test_false_precondition_names_condition_step_and_hints():
    v = run(task(BLOCKS, BLOCKS_P), "(pick-up a)", "(stack a b)", "(pick-up b)", "(stack b c)")
    assert not v.passed
    assert v.codes() == ["precondition-false"]
    f = v.findings[0]
    assert (f.step, f.step_text, f.action, f.condition) == (3, "(pick-up b)", "pick-up", "(clear b)")
    # Actions whose add effects include (clear ?): put-down ?x, stack ?x ?y (adds clear ?x),
    # unstack ?x ?y (adds clear ?y) — bound to b where the condition fixes them.
    assert sorted(h.call() for h in f.hints) == ["(put-down b)", "(stack b ?y)", "(unstack ?x b)"]
    assert v.steps_checked == 3


def test_keep_going_reports_every_problem_and_unmet_goals():
    t = task(BLOCKS, BLOCKS_P)
    steps = ("(pick-up a)", "(stack a b)", "(pick-up b)", "(stak b c)", "(stack b c d)",
             "(put-down zz)")
    stop = run(t, *steps)
    assert stop.codes() == ["precondition-false"]
    go = run(t, *steps, keep_going=True)
    assert go.codes() == ["precondition-false", "action-unknown", "arity-mismatch",
                          "object-unknown", "goal-unmet"]
    assert [f.step for f in go.findings] == [3, 4, 5, 6, None]
    assert go.findings[1].similar[:1] == ["stack"]
    assert (go.findings[2].expected, go.findings[2].given) == (2, 3)
    goal = go.findings[-1]
    assert goal.condition == "(on b c)"
    assert [h.call() for h in goal.hints] == ["(stack b c)"]
    assert go.steps_checked == 6


def test_empty_plan_reports_each_unmet_goal():
    v = run(task(BLOCKS, BLOCKS_P))
    assert [f.condition for f in v.findings] == ["(on a b)", "(on b c)"]
    assert v.codes() == ["goal-unmet", "goal-unmet"]


TOGGLE = """
(define (domain lamp)
  (:requirements :adl :numeric-fluents)
  (:predicates (on) (seen))
  (:functions (x) (y) (zero))
  (:action toggle :parameters ()
    :effect (and (when (on) (not (on))) (when (not (on)) (on))))
  (:action refresh :parameters ()
    :precondition (seen)
    :effect (and (not (seen)) (seen)))
  (:action swap :parameters ()
    :effect (and (assign (x) (y)) (assign (y) (x))))
  (:action bump :parameters ()
    :effect (and (increase (x) 1) (increase (x) 2)))
  (:action halve :parameters ()
    :effect (scale-down (x) (zero)))
  (:action need-big-x :parameters ()
    :precondition (>= (x) (+ (y) 10))
    :effect (seen))
  (:action read-undefined :parameters ()
    :precondition (> (undefined-one) 0)
    :effect (seen))
  (:action share :parameters ()
    :precondition (= (/ (y) (zero)) 1)
    :effect (seen)))
"""


def lamp(init: str, goal: str = "(and)") -> Task:
    problem = f"""(define (problem p) (:domain lamp)
      (:init {init})
      (:goal {goal}))"""
    domain = TOGGLE.replace("(:functions (x) (y) (zero))",
                            "(:functions (x) (y) (zero) (undefined-one))")
    return task(domain, problem)


def test_conditional_effects_read_the_state_before_the_step():
    # Source: PDDL 1.2 manual (McDermott 1998), conditional effects: every antecedent is
    # evaluated in the state before the action. A toggle written as two whens must flip once.
    t = lamp("(on) (= (x) 0) (= (y) 0) (= (zero) 0)", "(not (on))")
    assert run(t, "(toggle)").passed
    assert not run(t, "(toggle)", "(toggle)").passed


def test_deletes_happen_before_adds():
    # Source: STRIPS successor (s - del) | add (Fikes & Nilsson 1971), kept by PDDL 1.2:
    # an atom both deleted and added by one action holds afterwards.
    t = lamp("(seen) (= (x) 0) (= (y) 0) (= (zero) 0)", "(seen)")
    assert run(t, "(refresh)", "(refresh)").passed


def test_numeric_effects_are_simultaneous_and_increases_add_up():
    # Source: PDDL2.1 (Fox & Long 2003), section 5: all numeric effects of an action are
    # computed from the state before it. (assign x y) (assign y x) swaps the two values.
    t = lamp("(= (x) 3) (= (y) 5) (= (zero) 0)", "(and (= (x) 5) (= (y) 3))")
    assert run(t, "(swap)").passed
    assert not run(t, "(swap)", "(swap)").passed
    # Two increases of one fluent in one action: both apply (3 + 1 + 2 = 6). Common practice
    # in validators; PDDL2.1 leaves the combination to the additive reading.
    t2 = lamp("(= (x) 3) (= (y) 5) (= (zero) 0)", "(= (x) 6)")
    assert run(t2, "(bump)").passed


def test_numeric_precondition_reports_both_sides():
    t = lamp("(= (x) 3) (= (y) 5) (= (zero) 0)")
    v = run(t, "(need-big-x)")
    f = v.findings[0]
    assert f.code == "precondition-false"
    assert f.condition == "(>= (x) (+ (y) 10))"
    assert (f.left_value, f.right_value) == (3.0, 15.0)
    # Hints are direction-aware: only effects that raise x (or lower y) can help.
    assert sorted(h.call() for h in f.hints) == ["(bump)", "(swap)"]


def test_undefined_fluent_and_division_by_zero():
    # Source: PDDL2.1 (Fox & Long 2003), section 5: an expression with an undefined fluent
    # is undefined, and a condition or effect that needs it cannot be executed.
    t = lamp("(= (x) 3) (= (y) 5) (= (zero) 0)")
    v = run(t, "(read-undefined)")
    assert v.codes() == ["fluent-undefined"]
    assert (v.findings[0].fluent, v.findings[0].context) == ("(undefined-one)", "precondition")
    v = run(t, "(share)")
    assert v.codes() == ["division-by-zero"]
    assert v.findings[0].expression == "(/ (y) (zero))"
    v = run(t, "(halve)")
    assert v.codes() == ["division-by-zero"] and v.findings[0].context == "effect"


def test_exact_arithmetic():
    # Plan values are exact rationals: 0.1 + 0.2 equals 0.3, as the written numbers say
    # (binary floating point would disagree). PDDL2.1 defines fluents over the rationals.
    t = lamp("(= (x) 0.1) (= (y) 0.2) (= (zero) 0)", "(= (+ (x) (y)) 0.3)")
    assert run(t).passed


QUANT = """
(define (domain garden)
  (:requirements :adl :typing)
  (:types bed tool - object trowel - tool)
  (:constants shed - bed)
  (:predicates (watered ?b - bed) (dry ?b - bed) (has ?t - tool) (done))
  (:action water-all :parameters ()
    :effect (forall (?b - bed) (when (dry ?b) (and (watered ?b) (not (dry ?b))))))
  (:action finish :parameters (?t - tool ?a ?b - bed)
    :precondition (and (forall (?b2 - bed) (watered ?b2))
                       (exists (?t2 - trowel) (has ?t2))
                       (not (= ?a ?b))
                       (or (has ?t) (imply (watered ?a) (watered shed))))
    :effect (done)))
"""


def garden(init: str) -> Task:
    return task(QUANT, f"""(define (problem g) (:domain garden)
      (:objects east west - bed t1 - trowel rake - tool)
      (:init {init}) (:goal (done)))""")


def test_quantifiers_equality_and_forall_effects():
    # Source: PDDL 1.2 manual, ADL: forall/exists range over objects of the type (constants
    # included), forall effects with when apply per binding, = compares object names.
    t = garden("(dry east) (dry shed) (watered west) (has t1)")
    assert run(t, "(water-all)", "(finish rake east west)").passed
    v = run(t, "(finish rake east west)")
    # the forall is expanded, so each unwatered bed is its own finding
    assert v.codes() == ["precondition-false", "precondition-false"]
    assert [f.condition for f in v.findings] == ["(watered east)", "(watered shed)"]
    same = run(t, "(water-all)", "(finish rake east east)")
    assert [f.condition for f in same.findings] == ["(not (= east east))"]


def test_argument_types_with_subtypes():
    # Source: PDDL 1.2 manual, typing: an object of a subtype fits a parameter of its supertype.
    t = garden("(has t1) (watered east) (watered west) (watered shed)")
    assert run(t, "(finish t1 east west)").passed  # t1 is a trowel, a kind of tool
    v = run(t, "(finish east t1 west)")
    assert v.codes() == ["argument-type", "argument-type"]
    f = v.findings[0]
    assert (f.object, f.position, f.parameter, f.expected, f.actual) == \
        ("east", 1, "?t", ["tool"], ["bed"])


def test_durative_actions_are_read_start_then_end():
    # Sequential reading of a durative action (PDDL2.1, Fox & Long 2003, section 8): at-start
    # conditions before the start effects, over-all and at-end conditions before the end ones.
    domain = """(define (domain kiln) (:requirements :durative-actions :typing)
      (:types pot)
      (:predicates (raw ?p - pot) (hot) (fired ?p - pot) (cool))
      (:durative-action fire :parameters (?p - pot) :duration (= ?duration 4)
        :condition (and (at start (raw ?p)) (at start (cool)) (over all (hot)))
        :effect (and (at start (hot)) (at start (not (cool)))
                     (at end (fired ?p)) (at end (not (hot))) (at end (cool)))))"""
    t = task(domain, """(define (problem k) (:domain kiln) (:objects p1 p2 - pot)
      (:init (raw p1) (raw p2) (cool)) (:goal (and (fired p1) (fired p2))))""")
    assert run(t, "(fire p1)", "(fire p2)").passed
    assert run(t, "(fire p1)").codes() == ["goal-unmet"]


@pytest.mark.parametrize("keep_going", [False, True])
def test_same_task_object_reuses_its_compiled_form(keep_going):
    t = task(BLOCKS, BLOCKS_P)
    sim = PlanSimulator(keep_going=keep_going)
    first = sim.check(t, Plan.of("(pick-up a)"))
    assert sim.world(t) is sim.world(t)
    again = sim.check(t, Plan.of("(pick-up a)"))
    assert first.findings == again.findings


def test_conflicting_numeric_effects_are_a_finding():
    # An assign and an increase of one fluent in one action have no order-free meaning; PDDL2.1
    # (Fox & Long 2003) treats such effects as ill-defined (paraphrased from memory). The
    # unified-planning oracle refuses such a domain too, so we report the step instead of
    # picking an order.
    domain = """(define (domain meter) (:requirements :numeric-fluents)
      (:functions (level))
      (:action reset-and-bump :parameters ()
        :effect (and (assign (level) 1) (increase (level) 2)))
      (:action bump-twice :parameters ()
        :effect (and (increase (level) 1) (decrease (level) 3))))"""
    t = task(domain, """(define (problem m) (:domain meter) (:init (= (level) 5))
      (:goal (= (level) 3)))""")
    v = run(t, "(reset-and-bump)")
    assert v.codes() == ["effect-conflict"]
    assert (v.findings[0].fluent, v.findings[0].effects) == ("(level)", ["assign", "increase"])
    assert run(t, "(bump-twice)").passed  # 5 + 1 - 3 = 3: additive changes combine


def test_total_cost_starts_at_zero_when_the_problem_leaves_it_out():
    # :action-costs (IPC-2008 rules, from memory): total-cost appears only in increase
    # effects and the metric, so its start value cannot change validity; the
    # unified-planning oracle likewise keeps it out of the state. Any other fluent left
    # out is still undefined.
    domain = """(define (domain fees) (:requirements :action-costs)
      (:predicates (paid))
      (:functions (total-cost) - number (balance))
      (:action pay :parameters () :effect (and (paid) (increase (total-cost) 4)))
      (:action top-up :parameters () :effect (increase (balance) 1)))"""
    t = task(domain, "(define (problem f) (:domain fees) (:init) (:goal (paid)))")
    assert run(t, "(pay)").passed
    assert run(t, "(top-up)", "(pay)").codes() == ["fluent-undefined"]


def test_scale_effects_multiply_and_divide():
    # Source: PDDL2.1 (Fox & Long 2003), section 5: scale-up multiplies and scale-down divides
    # the fluent by the value, read in the state before the step. Hand-worked: 6 * 3 / 4 = 4.5.
    # (The unified-planning oracle cannot read these effects, so this check stands alone.)
    domain = """(define (domain mixer) (:requirements :numeric-fluents)
      (:functions (volume) (factor))
      (:action triple :parameters () :effect (scale-up (volume) (factor)))
      (:action quarter :parameters () :effect (scale-down (volume) 4)))"""
    t = task(domain, """(define (problem m) (:domain mixer)
      (:init (= (volume) 6) (= (factor) 3)) (:goal (= (volume) 4.5)))""")
    assert run(t, "(triple)", "(quarter)").passed
    assert run(t, "(quarter)", "(triple)").passed  # the same product in the other order
    assert not run(t, "(triple)").passed
