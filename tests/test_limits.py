"""The limits file: reading TOML and JSON, every kind of bad input, and checking it against a task.

Sources for the formats:
- TOML v1.0.0 (toml.io, 2021): ``[[name]]`` is an array of tables, ``[name]`` one
  table, ``inf`` and ``nan`` are float literals, a basic string may not hold a raw
  newline. (From memory.)
- JSON, RFC 8259: a trailing comma in an object is not allowed. (From memory.)
Everything else — field names, messages — is our own format, checked for its promise:
a bad file gives an InputError naming the file and the field (line and column for
syntax), never a traceback.
"""

from __future__ import annotations

import json
import os

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from plansieve.critics.errors import InputError, ModelError, PddlSyntaxError
from plansieve.critics.limits import Limits, attach_limits, load_limits, parse_limits
from plansieve.critics.model import Task
from plansieve.critics.pddl import parse_domain, parse_problem

FUZZ = int(os.environ.get("PLANSIEVE_FUZZ_EXAMPLES", "200"))

# An invented depot with two electric carriers.
DOMAIN = """
(define (domain depot-run)
  (:requirements :typing :numeric-fluents)
  (:types carrier bay)
  (:predicates (parked ?c - carrier ?b - bay) (inspected ?c - carrier))
  (:functions (charge ?c - carrier) (spent) (clock))
  (:action inspect :parameters (?c - carrier) :effect (inspected ?c)))
"""
PROBLEM = """
(define (problem morning) (:domain depot-run)
  (:objects carrier-7 carrier-9 - carrier bay-1 - bay)
  (:init (= (charge carrier-7) 20) (= (charge carrier-9) 9) (= (spent) 0) (= (clock) 0))
  (:goal (inspected carrier-7)))
"""

GOOD_TOML = """\
# battery and budget for the morning run
[[resource]]
fluent = "(charge carrier-7)"
floor = 6
unit = "kWh"
label = "battery reserve"

[[resource]]
fluent = "(spent)"
ceiling = 800.5

[[deadline]]
condition = "(inspected carrier-7)"
by = 14.5

[time]
makespan = 40
clock = "(clock)"
tolerance = 0.01
"""

GOOD = {
    "resource": [
        {"fluent": "(charge carrier-7)", "floor": 6, "unit": "kWh", "label": "battery reserve"},
        {"fluent": "(spent)", "ceiling": 800.5},
    ],
    "deadline": [{"condition": "(inspected carrier-7)", "by": 14.5}],
    "time": {"makespan": 40, "clock": "(clock)", "tolerance": 0.01},
}


@pytest.fixture(scope="module")
def depot() -> Task:
    d = parse_domain(DOMAIN)
    return Task(d, parse_problem(PROBLEM, d))


def spots(text: str, file: str = "limits.toml"):
    with pytest.raises(InputError) as info:
        parse_limits(text, file)
    return info.value.spots


# -- good files -----------------------------------------------------------------------


def test_good_toml_and_json_read_the_same():
    # Source: TOML v1.0.0 arrays of tables; RFC 8259 for the JSON form.
    from_toml = parse_limits(GOOD_TOML, "limits.toml")
    from_json = parse_limits(json.dumps(GOOD, indent=2), "limits.json")
    assert from_toml == from_json
    r0, r1 = from_toml.resource
    assert (r0.fluent, r0.floor, r0.ceiling, r0.unit, r0.label) == (
        "(charge carrier-7)", 6, None, "kWh", "battery reserve")
    assert (r1.floor, r1.ceiling) == (None, 800.5)
    assert (from_toml.deadline[0].condition, from_toml.deadline[0].by) == (
        "(inspected carrier-7)", 14.5)
    assert (from_toml.time.makespan, from_toml.time.clock, from_toml.time.tolerance) == (
        40, "(clock)", 0.01)


def test_an_empty_file_is_no_limits():
    assert parse_limits("", "limits.toml").empty
    assert parse_limits("{}", "limits.json") == Limits()
    assert Limits().time.tolerance == 0.001  # the default the issue names


def test_load_limits_reads_a_file(tmp_path):
    path = tmp_path / "morning.toml"
    path.write_text(GOOD_TOML)
    assert load_limits(path) == parse_limits(GOOD_TOML)


def test_attach_limits_keeps_a_good_file(depot):
    limits = parse_limits(GOOD_TOML)
    assert attach_limits(depot, limits, "limits.toml").limits is limits


# -- bad files: each names the file and the field ----------------------------------------


def test_toml_syntax_error_has_line_and_column():
    # Source: TOML v1.0.0: a basic string ends on its own line.
    (s,) = spots('[[resource]]\nfluent = "(spent)\nfloor = 1\n')
    assert (s.file, s.line, s.column) == ("limits.toml", 2, 18)
    assert s.message.startswith("not valid TOML")
    assert s.line_text == 'fluent = "(spent)'
    assert "^" in s.render()


def test_json_syntax_error_has_line_and_column():
    # Source: RFC 8259: no trailing comma inside an object.
    (s,) = spots('{"resource": [\n  {"fluent": "(spent)", "floor": 1,}]}', "limits.json")
    assert (s.file, s.line, s.column) == ("limits.json", 2, 36)  # at the "}"
    assert s.message.startswith("not valid JSON")


@pytest.mark.parametrize("text,field,words", [
    ('[[resource]]\nfloor = 3\n', "resource[0].fluent", "missing; this key is required here"),
    ('[[resource]]\nfluent = "(spent)"\nfloor = "six"\n', "resource[0].floor",
     "expected a number (got 'six')"),
    ('[[resource]]\nfluent = "(spent)"\nfloor = true\n', "resource[0].floor",
     "expected a number (got True)"),
    ('[[resource]]\nfluent = 5\nfloor = 1\n', "resource[0].fluent", "expected text in quotes"),
    ('[[resource]]\nfluent = "(spent)"\nflor = 1\n', "resource[0].flor",
     "unknown key; expected one of fluent, floor, ceiling, unit, label"),
    ('[[resource]]\nfluent = "(spent)"\n', "resource[0]", "give a floor, a ceiling or both"),
    ('[[resource]]\nfluent = "(spent)"\nfloor = 5\nceiling = 1\n', "resource[0]",
     "floor 5 is above ceiling 1"),
    # Source: TOML v1.0.0: inf and nan are float literals — still no use as a bound.
    ('[[resource]]\nfluent = "(spent)"\nfloor = inf\n', "resource[0].floor",
     "expected a finite number"),
    ('[[resource]]\nfluent = "(spent)"\nceiling = nan\n', "resource[0].ceiling",
     "expected a finite number"),
    ('resource = 5\n', "resource", "expected a list of tables, each written [[resource]]"),
    ('[resource]\nfluent = "(spent)"\nfloor = 1\n', "resource",
     "expected a list of tables, each written [[resource]]"),
    ('[[deadline]]\nby = 2\n', "deadline[0].condition", "missing"),
    ('[[deadline]]\ncondition = "(inspected carrier-7)"\nby = -2\n', "deadline[0].by",
     "expected a number of 0 or more"),
    ('[time]\nmakespan = 0\n', "time.makespan", "expected a number above 0"),
    ('[time]\ntolerance = "x"\n', "time.tolerance", "expected a number"),
    ('time = 3\n', "time", "expected a table"),
    ('resources = 1\n', "resources", "unknown key; expected one of resource, deadline, time"),
])
def test_bad_field_names_the_file_and_the_field(text, field, words):
    got = spots(text)
    assert any(s.field == field and words in s.message and s.file == "limits.toml"
               for s in got), [s.render() for s in got]
    # our own words, not the validation library's
    assert not any("Input should" in s.message or "Field required" in s.message for s in got)


def test_json_number_too_large_is_not_a_bound():
    # Source: RFC 8259 leaves number range to implementations; Python reads 1e400 as inf.
    (s,) = spots('{"time": {"makespan": 1e400}}', "limits.json")
    assert (s.field, s.message) == ("time.makespan", "expected a finite number (got inf)")


def test_json_that_is_not_a_table():
    (s,) = spots("{}\n".replace("{}", '{"resource": [1]}'), "limits.json")
    assert s.field == "resource[0]" and "expected a table" in s.message


def test_several_problems_come_together():
    got = spots('[[resource]]\nfloor = "x"\n[time]\nmakespan = -1\n')
    assert {s.field for s in got} == {"resource[0].fluent", "resource[0].floor", "time.makespan"}


def test_load_limits_file_problems(tmp_path):
    with pytest.raises(InputError) as info:
        load_limits(tmp_path / "absent.toml")
    assert info.value.first.message == "no such file"
    bad = tmp_path / "latin1.toml"
    bad.write_bytes(b'[[resource]]\nlabel = "r\xe9serve"\n')
    with pytest.raises(InputError) as info:
        load_limits(bad)
    assert info.value.first.file == str(bad) and "cannot read" in info.value.first.message


# -- attach_limits: the PDDL pieces against the task ---------------------------------------


@pytest.mark.parametrize("text,kind,field,words", [
    ('[[resource]]\nfluent = "(charj carrier-7)"\nfloor = 1\n', ModelError,
     "resource[0].fluent", "'charj' is not a declared function; did you mean 'charge'?"),
    ('[[resource]]\nfluent = "(charge carrier-99)"\nfloor = 1\n', ModelError,
     "resource[0].fluent", "'carrier-99' is not a declared object"),
    ('[[resource]]\nfluent = "(charge bay-1)"\nfloor = 1\n', ModelError,
     "resource[0].fluent", "'bay-1' is of type bay"),
    ('[[resource]]\nfluent = "(charge)"\nfloor = 1\n', ModelError,
     "resource[0].fluent", "takes 1 argument"),
    ('[[resource]]\nfluent = "(inspected carrier-7)"\nfloor = 1\n', ModelError,
     "resource[0].fluent", "is a predicate, not a function"),
    ('[[resource]]\nfluent = "(charge carrier-7"\nfloor = 1\n', PddlSyntaxError,
     "resource[0].fluent", "expected a closing ')'"),
    ('[[resource]]\nfluent = ""\nfloor = 1\n', PddlSyntaxError,
     "resource[0].fluent", "expected an opening '('"),
    ('[[deadline]]\ncondition = "(docked carrier-7)"\nby = 3\n', ModelError,
     "deadline[0].condition", "'docked' is not a declared predicate"),
    ('[time]\nclock = "(clok)"\n', ModelError, "time.clock", "'clok' is not a declared function"),
])
def test_attach_refuses_what_the_task_does_not_know(depot, text, kind, field, words):
    # Source for what counts as well-formed: PDDL2.1 (Fox & Long 2003) — a function term
    # names a declared function with one object of the right type per parameter.
    with pytest.raises(kind) as info:
        attach_limits(depot, parse_limits(text, "limits.toml"), "limits.toml")
    (s,) = info.value.spots
    assert (s.file, s.field) == ("limits.toml", field)
    assert words in s.message, s.message


def test_attach_reports_every_problem_at_once(depot):
    text = ('[[resource]]\nfluent = "(charj carrier-7)"\nfloor = 1\n'
            '[[resource]]\nfluent = "(charge carrier-99)"\nfloor = 1\n')
    with pytest.raises(ModelError) as info:
        attach_limits(depot, parse_limits(text), "limits.toml")
    assert [s.field for s in info.value.spots] == ["resource[0].fluent", "resource[1].fluent"]


# -- fuzz: any text, only our errors ---------------------------------------------------------

_PIECES = ["[[resource]]", "[[deadline]]", "[time]", "[resource]", "fluent", "floor", "ceiling",
           "unit", "label", "condition", "by", "makespan", "clock", "tolerance", "=", '"', "'",
           "(", ")", "[", "]", "{", "}", ",", ".", "#", "\n", " ", "-", "1", "0.5", "1e400",
           "inf", "nan", "true", "(charge carrier-7)", "(spent)", "(inspected carrier-7)",
           "carrier-9", "bay-1", "?x", "\\", "\t", "\u00e9", "\x00", ":", "null"]


@st.composite
def limits_text(draw) -> str:
    """A good TOML or JSON limits file with a few random edits."""
    text = draw(st.sampled_from([GOOD_TOML, json.dumps(GOOD), json.dumps(GOOD, indent=1), ""]))
    for _ in range(draw(st.integers(1, 6))):
        i = draw(st.integers(0, len(text)))
        how = draw(st.sampled_from(["insert", "delete", "replace", "duplicate-line", "swap"]))
        if how == "insert":
            text = text[:i] + draw(st.sampled_from(_PIECES)) + text[i:]
        elif how == "delete":
            text = text[:i] + text[i + draw(st.integers(1, 12)):]
        elif how == "replace" and text:
            text = text[:i] + draw(st.sampled_from(_PIECES)) + text[i + 1:]
        elif how == "duplicate-line":
            lines = text.split("\n")
            k = draw(st.integers(0, len(lines) - 1))
            lines.insert(k, lines[k])
            text = "\n".join(lines)
        else:
            lines = text.split("\n")
            if len(lines) > 1:
                a, b = draw(st.integers(0, len(lines) - 1)), draw(st.integers(0, len(lines) - 1))
                lines[a], lines[b] = lines[b], lines[a]
            text = "\n".join(lines)
    return text


@settings(max_examples=FUZZ, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text=limits_text())
def test_fuzzed_limits_files_give_only_our_errors(depot, text):
    # Common practice (fuzzing): whatever the text, the reader and the check against the
    # task either succeed or raise an InputError that names the file.
    try:
        limits = parse_limits(text, "fuzz.toml")
        attach_limits(depot, limits, "fuzz.toml")
    except InputError as e:
        assert e.spots and all(s.file == "fuzz.toml" for s in e.spots)
        assert all(s.field or s.line is not None or s.message for s in e.spots)
        e.render()
