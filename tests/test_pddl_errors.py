"""Bad PDDL gets one of our errors, at the right line and column, in plain words.

What counts as an error follows the PDDL papers: PDDL 1.2 manual (McDermott et al.
1998) sec. 4-6 for declarations, arities and types; PDDL2.1 (Fox & Long 2003) sec. 4
and 8 for functions and ?duration; PDDL3 (Gerevini & Long 2005) sec. 4 for
is-violated. Every domain here is invented for these tests (a tram depot in the
town of Orrin, a bakery, a lighthouse).
"""

from __future__ import annotations

import pytest

from plansieve.critics.errors import (
    InputError, ModelError, PddlSyntaxError, UnsupportedRequirement,
)
from plansieve.critics.model import Atom
from plansieve.critics.pddl import (
    build_problem, load_domain, load_problem, parse_domain, parse_problem,
)


def where(err: InputError) -> list[tuple[int | None, int | None]]:
    return [(s.line, s.column) for s in err.spots]


def no_parser_internals(err: InputError) -> None:
    text = err.render()
    for leak in ("Token(", "Expected one of", "$END", "__ANON", "LPAR", "RPAR", "Traceback",
                 "lark"):
        assert leak not in text, text


# ---------------------------------------------------------------------------
# Syntax errors

def refused(kind: type[InputError], text: str, problem_of, files: tuple[str, str]):
    """Read ``text`` as a domain (or a problem of ``problem_of``); expect ``kind``."""
    with pytest.raises(kind) as e:
        if problem_of is None:
            parse_domain(text, files[0])
        else:
            parse_problem(text, problem_of, files[1])
    no_parser_internals(e.value)
    return e.value


def syntax(text: str, problem_of=None) -> PddlSyntaxError:
    err = refused(PddlSyntaxError, text, problem_of, ("orrin.pddl", "orrin-p.pddl"))
    assert len(err.spots) == 1
    return err


def test_missing_closing_parenthesis_at_end_of_file():
    err = syntax("(define (domain orrin)\n  (:predicates (parked ?t))\n")
    s = err.first
    # The file ends after line 2; the caret sits just past its last character.
    assert (s.file, s.line, s.column) == ("orrin.pddl", 2, 28)
    assert s.message == "expected a closing ')' or an opening '(', but found the end of the file"
    assert s.line_text == "  (:predicates (parked ?t))"


def test_unexpected_word_names_what_was_expected_and_where():
    err = syntax("(define (domain orrin)\n"
                 "  (:predicates (parked ?t))\n"
                 "  (:action Park\n"
                 "    :parameters (t)\n"
                 "    :effect (parked ?t)))\n")
    s = err.first
    assert (s.line, s.column) == (4, 18)
    assert s.message == ("expected a closing ')', '-' or a variable like ?x, but found 't' "
                         "(in the :parameters of action 'Park')")
    assert s.render().endswith("    :parameters (t)\n" + " " * 4 + " " * 17 + "^")


def test_unknown_section_keyword():
    err = syntax("(define (domain orrin)\n  (:predicate (parked ?t)))")
    assert where(err) == [(2, 4)]
    assert err.first.message.startswith("expected ':action', ':constants', ':constraints', "
                                        "':durative-action', ':functions', ':predicates', "
                                        "':requirements' or ':types', but found ':predicate'")


def test_character_outside_the_language_and_original_case_shown():
    err = syntax("(define (domain orrin)\n  (:predicates (Parked ?T { )))")
    assert where(err) == [(2, 27)]
    assert err.first.message == ("expected a closing ')', '-' or a variable like ?x, but found "
                                 "'{' (in the :predicates section)")
    assert err.first.line_text == "  (:predicates (Parked ?T { )))"


def test_dash_type_without_names():
    err = syntax("(define (domain orrin)\n  (:types - vehicle))")
    assert where(err) == [(2, 13)]
    assert "no name comes before it" in err.first.message


def test_effect_keyword_where_a_formula_belongs():
    err = syntax("(define (domain orrin) (:predicates (p))\n"
                 "  (:action go :precondition (and (p) (increase (p) 1)) :effect (p)))")
    # `increase` is read as a predicate name here, so the nested fact is what breaks.
    assert where(err) == [(2, 48)]
    assert err.first.message == ("expected a closing ')', a name or a variable like ?x, but "
                                 "found '(p)' (in the :precondition of action 'go')")


def test_effects_part_after_effect():
    err = syntax("(define (domain orrin) (:predicates (p))\n"
                 "  (:action go :effect (p) :precondition (p)))")
    assert where(err) == [(2, 27)]
    assert err.first.message.startswith("expected a closing ')', but found ':precondition'")


def test_empty_text():
    err = syntax("")
    assert where(err) == [(1, 1)]
    assert err.first.message == "expected an opening '(', but found the end of the file"


def test_timed_literal_without_body_in_problem():
    d = parse_domain("(define (domain orrin) (:predicates (open)))")
    err = syntax("(define (problem p) (:domain orrin)\n  (:init (at 5))\n  (:goal (open)))", d)
    assert where(err) == [(2, 15)]
    assert "(in the :init section)" in err.first.message


def test_syntax_error_in_a_long_init_keeps_the_position():
    d = parse_domain("(define (domain orrin) (:predicates (at ?a ?b)))")
    facts = "\n".join(f"  (at t{i} s{i})" for i in range(500))
    err = syntax(f"(define (problem p) (:domain orrin)\n (:objects)\n (:init\n{facts}\n"
                 f"  (at t9 s9\n  (at t1 s1))\n (:goal (and)))", d)
    # line 1-3 header, 500 facts on lines 4..503, the broken fact on line 504.
    assert where(err) == [(505, 3)]


# ---------------------------------------------------------------------------
# Semantic errors: each with its exact place

TRAMS = """(define (domain orrin-trams)
  (:requirements :typing :numeric-fluents)
  (:types tram line - object stop)
  (:constants depot - stop)
  (:predicates (at ?t - tram ?s - stop) (serves ?l - line ?s - stop))
  (:functions (power ?t - tram))
  (:action drive
    :parameters (?t - tram ?from ?to - stop)
    :precondition (and (at ?t ?from) (>= (power ?t) 1))
    :effect (and (not (at ?t ?from)) (at ?t ?to) (decrease (power ?t) 1))))
"""


def model_error(text: str, problem_of=None) -> ModelError:
    return refused(ModelError, text, problem_of, ("trams.pddl", "trams-p.pddl"))


def test_domain_with_many_mistakes_reports_all_of_them_in_order():
    text = """(define (domain orrin-trams)
  (:types tram - object stop stop)
  (:constants depot - stop depot - stop)
  (:predicates (at ?t - tram ?s - stop) (at ?x) (parked ?t - trm ?t - tram))
  (:functions (power ?t - tram) (power))
  (:action drive
    :parameters (?t - tram ?to - stop ?to - stop)
    :precondition (and (at ?t ?from) (docked ?t) (at ?t) (>= (charge ?t) 1)
                       (at ?t remise) (at depot depot))
    :effect (and (at ?t ?to) (decrease (power ?t ?to) 1)))
  (:action drive :parameters () :effect (and)))
"""
    err = model_error(text)
    got = [(s.line, s.column, s.message) for s in err.spots]
    assert [(line, col) for line, col, _ in got] == [
        (2, 30),   # type stop declared twice
        (3, 28),   # constant depot declared twice
        (4, 42),   # predicate at declared twice
        (4, 57),   # type trm (of ?t) not declared
        (4, 66),   # parameter ?t twice
        (5, 34),   # power declared twice (predicates and functions share one namespace)
        (7, 39),   # parameter ?to twice
        (8, 31),   # ?from not declared
        (8, 39),   # docked not a predicate
        (8, 51),   # at given 1 argument
        (8, 63),   # charge not a function
        (9, 31),   # remise not a constant
        (9, 43),   # depot is a stop, not a tram
        (10, 41),  # power given 2 arguments
        (11, 12),  # action drive twice
    ]
    messages = {(l, c): m for l, c, m in got}
    assert messages[(2, 30)].startswith("type 'stop' is declared twice (first at line 2)")
    assert messages[(3, 28)].startswith("constant 'depot' is declared twice (first at line 3)")
    assert messages[(4, 42)].startswith("predicate 'at' is declared twice (first at line 4)")
    assert messages[(4, 57)].startswith("type 'trm' of parameter '?t' is not declared; did "
                                        "you mean 'tram'?")
    assert messages[(4, 66)].startswith("parameter '?t' is declared twice")
    assert messages[(5, 34)].startswith("function 'power' is declared twice")
    assert messages[(7, 39)].startswith("parameter '?to' is declared twice")
    assert messages[(8, 31)] == ("variable '?from' is not declared in action 'drive'; expected "
                                 "a parameter or a variable bound by forall or exists")
    assert messages[(8, 39)].startswith("'docked' is not a declared predicate")
    assert messages[(8, 51)] == "predicate 'at' takes 2 arguments (?t ?s), but 1 is given"
    assert messages[(8, 63)].startswith("'charge' is not a declared function")
    assert messages[(9, 31)].startswith("'remise' is not a declared constant")
    assert messages[(9, 43)] == ("'depot' is of type stop, but argument 1 of 'at' (?t) must be "
                                 "of type tram")
    assert messages[(10, 41)] == "function 'power' takes 1 argument (?t), but 2 are given"
    assert messages[(11, 12)].startswith("action 'drive' is declared twice (first at line 6)")


def test_undeclared_type_without_types_section():
    err = model_error("(define (domain bakery)\n  (:predicates (baked ?l - loaf)))")
    assert where(err) == [(2, 23)]
    assert err.first.message == ("type 'loaf' of parameter '?l' is not declared (the domain has "
                                 "no (:types ...) section); expected a type from (:types ...) or "
                                 "'object'")


def test_type_cycle():
    err = model_error("(define (domain bakery)\n  (:types loaf - bun bun - loaf))")
    assert where(err) == [(2, 11), (2, 22)]
    assert all("its own ancestor" in s.message for s in err.spots)


def test_undeclared_variable_in_quantified_and_conditional_bodies():
    err = model_error("""(define (domain bakery)
  (:predicates (hot ?x) (sold ?x))
  (:action sell :parameters (?a)
    :precondition (forall (?b) (or (hot ?b) (hot ?c)))
    :effect (forall (?d) (when (hot ?d) (sold ?e)))))""")
    assert where(err) == [(4, 50), (5, 47)]
    assert [s.message.split(";")[0] for s in err.spots] == [
        "variable '?c' is not declared in action 'sell'",
        "variable '?e' is not declared in action 'sell'"]


def test_duration_outside_durative_action_and_function_result_type():
    err = model_error("""(define (domain bakery)
  (:requirements :numeric-fluents)
  (:functions (heat) - degrees)
  (:action bake :effect (increase (heat) ?duration)))""")
    assert where(err) == [(3, 16), (4, 42)]
    assert err.spots[0].message == "function 'heat' has result type 'degrees'; expected '- number'"
    assert err.spots[1].message == "?duration can only be used inside a durative action"


def test_predicate_used_as_function_and_back():
    err = model_error("""(define (domain bakery)
  (:predicates (hot)) (:functions (heat))
  (:action bake :precondition (and (heat) (> (hot) 1)) :effect (hot)))""")
    assert where(err) == [(3, 37), (3, 47)]
    assert err.spots[0].message.startswith("'heat' is a function, not a predicate")
    assert err.spots[1].message.startswith("'hot' is a predicate, not a function")


def test_domain_constraints_use_constants_only():
    err = model_error("""(define (domain bakery)
  (:requirements :constraints)
  (:constants oven)
  (:predicates (hot ?x))
  (:constraints (always (hot stove))))""")
    assert where(err) == [(5, 30)]
    assert err.first.message.startswith("'stove' is not a declared constant")


def test_duplicate_sections():
    err = model_error("(define (domain bakery)\n  (:predicates (a))\n  (:predicates (b)))")
    assert where(err) == [(3, 4)]
    assert err.first.message.startswith("a second (:predicates ...) section (first at line 2)")


# -- problems ---------------------------------------------------------------

def trams():
    return parse_domain(TRAMS, "trams.pddl")


def test_problem_with_many_mistakes():
    text = """(define (problem rush-hour)
  (:domain orrin-trams)
  (:objects t1 t2 - tram red - line north - stop t1 - tram red - bus)
  (:init (at t1 north) (at red north) (at t3 north) (serves red) (moving t2)
         (= (power t1) 5) (= (power t1) 6) (= (power north) 2) (= (speed t1) 3))
  (:goal (and (at t1 depot) (at ?t north) (exists (?x - tram) (at ?x depot))
              (at north t1))))
"""
    err = model_error(text, trams())
    assert [(s.line, s.column, s.message) for s in err.spots] == [
        (3, 50, "object 't1' is declared twice (first at line 3); expected each object once"),
        (3, 60, "object 'red' is declared twice (first at line 3); expected each object once"),
        (3, 60, "type 'bus' of object 'red' is not declared; expected a type from (:types "
                "...) or 'object'"),
        (4, 28, "'red' is of type line, but argument 1 of 'at' (?t) must be of type tram"),
        (4, 43, "'t3' is not a declared object or constant"),
        (4, 54, "predicate 'serves' takes 2 arguments (?l ?s), but 1 is given"),
        (4, 67, "'moving' is not a declared predicate"),
        (5, 27, "(power t1) is given two initial values, 5 (line 5) and 6; expected one value"),
        (5, 54, "'north' is of type stop, but argument 1 of 'power' (?t) must be of type tram"),
        (5, 68, "'speed' is not a declared function"),
        (6, 33, "variable '?t' is not declared in the problem; expected a variable bound by "
                "forall or exists"),
        (7, 19, "'north' is of type stop, but argument 1 of 'at' (?t) must be of type tram"),
        (7, 25, "'t1' is of type tram, but argument 2 of 'at' (?s) must be of type stop"),
    ]


def test_problem_for_another_domain_and_missing_domain():
    err = model_error("(define (problem p)\n  (:domain orrin-buses)\n  (:goal (and)))", trams())
    assert where(err) == [(2, 12)]
    assert err.first.message == ("this problem is for domain 'orrin-buses', but the domain given "
                                 "is 'orrin-trams'; expected (:domain orrin-trams)")
    err = model_error("(define (problem p)\n  (:goal (and)))", trams())
    assert where(err) == [(1, 18)]
    assert err.first.message.startswith("the problem does not say its domain")


def test_timed_literal_checks_and_negative_time():
    err = model_error("""(define (problem p) (:domain orrin-trams)
  (:objects t1 - tram)
  (:init (at -2 (at t1 depot)) (at 4 (not (at t1 nowhere))) (at 5 (= (power t1 t1) 1)))
  (:goal (and)))""", trams())
    assert where(err) == [(3, 11), (3, 50), (3, 71)]
    assert err.spots[0].message.startswith("a timed initial literal at time -2")
    assert err.spots[1].message.startswith("'nowhere' is not a declared object or constant")
    assert err.spots[2].message.startswith("function 'power' takes 1 argument")


def test_unknown_preference_in_metric():
    d = parse_domain("""(define (domain lighthouse)
  (:requirements :preferences) (:predicates (lit))
  (:action light :precondition (preference early (not (lit))) :effect (lit)))""")
    ok = parse_problem("""(define (problem night) (:domain lighthouse)
  (:goal (preference dark (lit)))
  (:metric minimize (+ (is-violated dark) (is-violated early))))""", d)
    assert ok.metric is not None
    err = model_error("""(define (problem night) (:domain lighthouse)
  (:goal (preference dark (lit)))
  (:metric minimize (is-violated drak)))""", d)
    assert where(err) == [(3, 34)]
    assert err.first.message == ("no preference is named 'drak'; did you mean 'dark'?; expected "
                                 "the name of a preference in the goal or constraints")


def test_object_may_repeat_a_constant_with_the_same_type_only():
    d = trams()
    p = parse_problem("(define (problem p) (:domain orrin-trams) (:objects depot - stop)"
                      " (:init) (:goal (and)))", d)
    assert dict(p.objects) == {"depot": ("stop",)}
    err = model_error("(define (problem p) (:domain orrin-trams)\n (:objects depot - tram)"
                      " (:init) (:goal (and)))", d)
    assert where(err) == [(2, 12)]
    assert "repeats a domain constant with another type (stop)" in err.first.message


# ---------------------------------------------------------------------------
# Unsupported requirements

def unsupported(text: str, problem_of=None) -> UnsupportedRequirement:
    return refused(UnsupportedRequirement, text, problem_of, ("x.pddl", "x-p.pddl"))


def test_unsupported_and_unknown_requirements_are_named():
    err = unsupported("(define (domain d)\n  (:requirements :strips :derived-predicates "
                      ":object-fluents :teleportation))")
    assert where(err) == [(2, 26), (2, 46), (2, 62)]
    assert err.spots[0].message.startswith("requirement :derived-predicates (derived "
                                           "predicates) is not supported")
    assert err.spots[1].message.startswith("requirement :object-fluents")
    assert err.spots[2].message.startswith("unknown requirement :teleportation")


def test_derived_section_is_refused_even_without_requirement():
    err = unsupported("(define (domain d) (:predicates (a) (b))\n"
                      "  (:derived (a) (and (b) (not (a)))))")
    assert where(err) == [(2, 3)]
    assert ":derived-predicates" in err.first.message


def test_continuous_time_and_continuous_effects():
    err = unsupported("""(define (domain d) (:requirements :durative-actions :numeric-fluents)
  (:functions (level))
  (:durative-action fill :parameters () :duration (= ?duration 3) :condition ()
    :effect (at end (increase (level) (* #t 2)))))""")
    assert where(err) == [(4, 42)]
    assert "#t" in err.first.message and ":continuous-effects" in err.first.message
    err = unsupported("""(define (domain d) (:functions (level))
  (:durative-action fill :parameters () :duration (= ?duration 3)
    :effect (increase (level) 2)))""")
    assert where(err) == [(3, 13)]


def test_object_valued_function_is_refused():
    err = unsupported("(define (domain d) (:types box)\n  (:functions (holder) - box))")
    assert where(err) == [(2, 16)]
    assert err.first.message.startswith("function 'holder' returns an object (box), which "
                                        "needs :object-fluents")


def test_problem_requirements_are_checked():
    d = parse_domain("(define (domain d) (:predicates (a)))")
    err = unsupported("(define (problem p) (:domain d)\n (:requirements :open-world) (:goal (a)))",
                      d)
    assert where(err) == [(2, 17)]


def test_undeclared_requirements_are_not_demanded():
    # Common practice: mature PDDL readers accept features used without their
    # requirement flag; so do we.
    d = parse_domain("""(define (domain d) (:types a)
      (:predicates (p ?x - a))
      (:action go :parameters (?x - a)
        :precondition (or (not (p ?x)) (exists (?y - a) (= ?x ?y)))
        :effect (forall (?z - a) (when (p ?z) (not (p ?z))))))""")
    assert "go" in d.actions and d.requirements == frozenset()


# ---------------------------------------------------------------------------
# Files

def test_missing_file_and_directory(tmp_path):
    with pytest.raises(InputError) as e:
        load_domain(tmp_path / "nope.pddl")
    assert e.value.first.file == str(tmp_path / "nope.pddl")
    assert e.value.first.line is None and "no such file" in e.value.first.message
    with pytest.raises(InputError) as e:
        load_domain(tmp_path)
    assert "directory" in e.value.first.message


def test_file_that_is_not_utf8(tmp_path):
    f = tmp_path / "latin.pddl"
    f.write_bytes(b"(define (domain d)\n  ; caf\xe9 owner\n  (:predicates (a)))")
    with pytest.raises(InputError) as e:
        load_domain(f)
    s = e.value.first
    assert (s.file, s.line, s.column) == (str(f), 2, 8)
    assert "0xe9 is not UTF-8" in s.message
    assert s.line_text == "  ; caf\ufffd owner"


def test_errors_in_a_problem_file_name_the_file(tmp_path):
    f = tmp_path / "rush.pddl"
    f.write_text("(define (problem p) (:domain orrin-trams)\n (:init (at t1 depot)) (:goal (and)))")
    with pytest.raises(ModelError) as e:
        load_problem(f, trams())
    assert e.value.first.render().startswith(f"{f}:2:13: 't1' is not a declared object")


# ---------------------------------------------------------------------------
# Problems built from Python: errors name the field

def test_build_problem_errors_name_the_field():
    with pytest.raises(ModelError) as e:
        build_problem(trams(), name="p",
                      objects={"t1": "tram", "red": "bus", "Bad Name": "tram"},
                      init=["(at t1 depot)", ("at", "t1", "t9"), Atom("moving", ("t1",)),
                            "(serves t1 depot)", 42],
                      fluents={"(power t1)": 3, ("power", "depot"): 1, "(power t1 t1)": "x"},
                      goal="(and (at t1 depot) (at ?x depot))",
                      metric="minimize (power t2)")
    spots = [(s.field, s.line, s.column, s.message.split(";")[0]) for s in e.value.spots]
    assert spots == [
        ("objects[Bad Name]", None, None, "'Bad Name' is not a PDDL name"),
        ("objects[red]", None, None,
         "type 'bus' of object 'red' is not declared"),
        ("init[1]", None, None, "'t9' is not a declared object or constant"),
        ("init[2]", None, None, "'moving' is not a declared predicate"),
        ("init[3]", 1, 9, "'t1' is of type tram, but argument 1 of 'serves' (?l) must be of "
                          "type line"),
        ("init[4]", None, None, "42 is not a fact"),
        ("fluents[(power depot)]", None, None,
         "'depot' is of type stop, but argument 1 of 'power' (?t) must be of type tram"),
        ("fluents[(power t1 t1)]", None, None, "'x' is not a value for (power t1 t1)"),
        ("goal", 1, 24, "variable '?x' is not declared in the problem"),
        ("metric", 1, 17, "'t2' is not a declared object or constant"),
    ]
    assert e.value.spots[4].line_text == "(serves t1 depot)"
    assert "(at init[3])" in e.value.spots[4].render()


def test_build_problem_syntax_error_names_the_field():
    with pytest.raises(PddlSyntaxError) as e:
        build_problem(trams(), name="p", objects={"t1": "tram"},
                      init=["(at t1 depot)", "(at t1"], goal="(and (at t1 depot)")
    assert [(s.field, s.line, s.column) for s in e.value.spots] == [
        ("init[1]", 1, 7), ("goal", 1, 19)]
    no_parser_internals(e.value)


def test_build_problem_rejects_wrong_argument_shapes():
    with pytest.raises(InputError) as e:
        build_problem(trams(), name="p", objects=["t1"], init=[], goal=None)
    assert (e.value.first.field, e.value.first.message) == (
        "objects", "list given; expected a mapping")
    with pytest.raises(InputError) as e:
        build_problem(trams(), name="p", objects={}, init="(at t1 depot)", goal=None)
    assert e.value.first.field == "init"
    with pytest.raises(ModelError) as e:
        build_problem(trams(), name="p", objects={"t1": 7}, init=[], goal=42)
    assert [(s.field, s.message.split(";")[0]) for s in e.value.spots] == [
        ("objects[t1]", "7 is not a type"), ("goal", "42 is not a formula")]


def test_not_with_a_bare_name_in_a_timed_literal_is_a_syntax_error():
    # PDDL 2.2 (Edelkamp & Hoffmann 2004) timed initial literals: the body is a literal,
    # so a negation wraps an atom, (not (p)). `(not p)` must not be read as a fact named "not".
    from plansieve.critics.errors import PddlSyntaxError
    from plansieve.critics.pddl import parse_domain, parse_problem

    d = parse_domain("(define (domain x) (:requirements :timed-initial-literals) "
                     "(:predicates (p) (nota)))")
    with pytest.raises(PddlSyntaxError) as err:
        parse_problem("(define (problem y) (:domain x)\n(:init (at 5 (not p)) (nota))\n"
                      "(:goal (p)))", d, "til.pddl")
    assert (err.value.first.line, err.value.first.column) == (2, 19)
    ok = parse_problem("(define (problem y) (:domain x) (:init (at 5 (not (p))) (nota)) "
                       "(:goal (p)))", d)
    assert ok.init == {("nota",)} and ok.timed_literals[0].time == 5
