"""Tolerant plan extraction from a guesser's free-text answer.

The answers below are of our own invention: a courier fleet in the town of
Lowmere (vans between the depot, Tannery Lane, Mill Row and the quayside) and
delivery drones between the Ashcombe, Brindle Yard and Corran Pad depots.
The markdown features (numbered and bulleted lists, ``` fences, inline code,
**bold**) follow CommonMark (commonmark.org spec, from memory); the step syntax
follows the plan-file format checked in test_plan_text.py.
"""

from __future__ import annotations

import json
import os
from textwrap import dedent

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from plansieve.adapters.extract import Extraction, UnreadLine, extract_plan
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.plan_text import read_plan

FUZZ = int(os.environ.get("PLANSIEVE_FUZZ_EXAMPLES", "200"))

COURIER = ["load", "unload", "drive", "refuel"]
DRONE = ["fly", "pick-up", "drop-off", "charge"]


def text(s: str) -> str:
    return dedent(s).lstrip("\n")


def read(answer: str, names=None) -> tuple[list[tuple[int, str]], list[tuple[int, str, str]]]:
    got = extract_plan(answer, names)
    assert isinstance(got, Extraction)
    return ([(s.line, s.to_line()) for s in got.plan],
            [(u.line, u.text, u.reason) for u in got.unread])


# --- the corpus: whole answers, exact plans and exact unread lines --------------------
# Each case: (answer, action names or None, [(line, step)], [(line, line text, words in reason)])

CORPUS = {
    "fenced plan between prose": (text("""
        Here is my plan for the Lowmere morning round:

        ```pddl
        (load parcel-7 van-2 lowmere-depot)
        (drive van-2 lowmere-depot tannery-lane)
        (unload parcel-7 van-2 tannery-lane)
        ```

        This should work because van-2 starts at the depot with parcel-7.
        """), COURIER,
        [(4, "(load parcel-7 van-2 lowmere-depot)"),
         (5, "(drive van-2 lowmere-depot tannery-lane)"),
         (6, "(unload parcel-7 van-2 tannery-lane)")],
        []),

    "numbered call style with bold and remarks": (text("""
        Sure! Let me think step by step.

        1. **load**(parcel-3, van-1, lowmere-depot) - parcel-3 waits at the depot
        2. drive(van-1,lowmere-depot,mill-row)
        3. Unload(Parcel-3, van-1, Mill-Row)

        The van never needs fuel on this short run.
        """), COURIER,
        [(3, "(load parcel-3 van-1 lowmere-depot)"),
         (4, "(drive van-1 lowmere-depot mill-row)"),
         (5, "(unload parcel-3 van-1 mill-row)")],
        []),

    "bare words with a misspelt action": (text("""
        Plan:
        1. load parcel-9 van-3 lowmere-depot
        2. drvie van-3 lowmere-depot quayside
        3. unload parcel-9 van-3 quayside
        """), COURIER,
        [(2, "(load parcel-9 van-3 lowmere-depot)"),
         (4, "(unload parcel-9 van-3 quayside)")],
        [(3, "2. drvie van-3 lowmere-depot quayside", "'drvie' is not one of the domain's actions")]),

    "remarks in a list, then a fenced plan": (text("""
        Observations:
        - The van is at the depot.
        - Parcel 4 must reach Mill Row by noon.

        ```
        (load parcel-4 van-1 lowmere-depot)
        (drive van-1 lowmere-depot mill-row)
        (unload parcel-4 van-1 mill-row)
        ```
        """), COURIER,
        [(6, "(load parcel-4 van-1 lowmere-depot)"),
         (7, "(drive van-1 lowmere-depot mill-row)"),
         (8, "(unload parcel-4 van-1 mill-row)")],
        []),

    "timed drone plan under Step markers": (text("""
        Step 1: 0.0: (fly drone-2 ashcombe brindle-yard) [12.5]
        Step 2: 12.5: (pick-up drone-2 crate-11 brindle-yard) [1]
        **Step 3:** 13.5: (fly drone-2 brindle-yard corran-pad) [9.25]
        Step 4 - 22.75: (drop-off drone-2 crate-11 corran-pad) [1]
        """), DRONE,
        [(1, "0: (fly drone-2 ashcombe brindle-yard) [12.5]"),
         (2, "12.5: (pick-up drone-2 crate-11 brindle-yard) [1]"),
         (3, "13.5: (fly drone-2 brindle-yard corran-pad) [9.25]"),
         (4, "22.75: (drop-off drone-2 crate-11 corran-pad) [1]")],
        []),

    "several steps on one line": (text("""
        My plan:
        (fly drone-1 ashcombe corran-pad) (pick-up drone-1 crate-2 corran-pad), (fly drone-1 corran-pad ashcombe) -> (drop-off drone-1 crate-2 ashcombe)
        """), DRONE,
        [(2, "(fly drone-1 ashcombe corran-pad)"),
         (2, "(pick-up drone-1 crate-2 corran-pad)"),
         (2, "(fly drone-1 corran-pad ashcombe)"),
         (2, "(drop-off drone-1 crate-2 ashcombe)")],
        []),

    "JSON list embedded in prose": (text("""
        I'll return the steps as JSON so your tool can parse them:
        [
          {"action": "load", "args": ["parcel-1", "van-4", "lowmere-depot"]},
          {"action": "drive", "args": ["van-4", "lowmere-depot", "quayside"], "note": "via the bridge"},
          {"action": "UNLOAD", "args": ["parcel-1", "van-4", "quayside"]}
        ]
        Let me know if you need anything else.
        """), COURIER,
        [(3, "(load parcel-1 van-4 lowmere-depot)"),
         (4, "(drive van-4 lowmere-depot quayside)"),
         (5, "(unload parcel-1 van-4 quayside)")],
        []),

    "JSON object in a fence with one bad step": (text("""
        ```json
        {"steps": [
          {"action": "charge", "args": ["drone-5", "ashcombe"], "time": 0, "duration": 30},
          {"action": "fly", "args": ["drone-5", "ashcombe", 7], "time": 30},
          {"action": "fly", "args": ["drone-5", "ashcombe", "brindle-yard"], "time": 30, "duration": 14}
        ], "confidence": "high"}
        ```
        """), DRONE,
        [(3, "0: (charge drone-5 ashcombe) [30]"),
         (5, "30: (fly drone-5 ashcombe brindle-yard) [14]")],
        [(4, '  {"action": "fly", "args": ["drone-5", "ashcombe", 7], "time": 30},',
          "steps[1].args[2]: expected a name in double quotes — found the number 7")]),

    "Python-style list instead of JSON": (text("""
        Here you go:
        [{'action': 'fly', 'args': ['drone-1', 'ashcombe', 'corran-pad']}]
        """), DRONE,
        [],
        [(2, "[{'action': 'fly', 'args': ['drone-1', 'ashcombe', 'corran-pad']}]",
          "the JSON step list cannot be read: expected a field name in double quotes")]),

    "fence with comments, a broken line and bare words": (text("""
        ```
        ; morning run
        (load parcel-2 van-1 lowmere-depot)
        (drive van-1 lowmere-depot tannery-lane
        drive van-1 tannery-lane mill-row
        unload parcel-2 van-1 mill-row  ; deliver
        ```
        """), COURIER,
        [(3, "(load parcel-2 van-1 lowmere-depot)"),
         (5, "(drive van-1 tannery-lane mill-row)"),
         (6, "(unload parcel-2 van-1 mill-row)")],
        [(4, "(drive van-1 lowmere-depot tannery-lane", "missing closing ')'")]),

    "mixed bullets and a remark inside the plan list": (text("""
        To deliver both parcels:
        - `(load parcel-5 van-2 lowmere-depot)`
        * load(parcel-6, van-2, lowmere-depot)
        \u2022 drive van-2 lowmere-depot quayside
        - then hand both parcels to the quay office
        - (unload parcel-5 van-2 quayside) (unload parcel-6 van-2 quayside)
        """), COURIER,
        [(2, "(load parcel-5 van-2 lowmere-depot)"),
         (3, "(load parcel-6 van-2 lowmere-depot)"),
         (4, "(drive van-2 lowmere-depot quayside)"),
         (6, "(unload parcel-5 van-2 quayside)"),
         (6, "(unload parcel-6 van-2 quayside)")],
        [(5, "- then hand both parcels to the quay office",
          "'then' is not one of the domain's actions")]),

    "unknown actions in call and s-expression style are still read": (text("""
        1. teleport(parcel-8, quayside)
        2. (beam parcel-8 mill-row)
        """), COURIER,
        [(1, "(teleport parcel-8 quayside)"), (2, "(beam parcel-8 mill-row)")],
        []),

    "numbered bare words with dashes, colons and a full stop": (text("""
        Answer:
        1) fly drone-4 corran-pad brindle-yard \u2014 shortest hop
        2) pick-up drone-4 crate-3 brindle-yard
        3) fly drone-4 brindle-yard ashcombe: back home
        4) drop-off drone-4 crate-3 ashcombe.
        """), DRONE,
        [(2, "(fly drone-4 corran-pad brindle-yard)"),
         (3, "(pick-up drone-4 crate-3 brindle-yard)"),
         (4, "(fly drone-4 brindle-yard ashcombe)"),
         (5, "(drop-off drone-4 crate-3 ashcombe)")],
        []),

    "reasoning list is prose, plan list is read (no action names)": (text("""
        Let me reason:
        1. The crate is at Brindle Yard.
        2. Drone-3 is charged.

        Plan:
        - fly drone-3 ashcombe brindle-yard
        - pick-up drone-3 crate-9 brindle-yard
        """), None,
        [(6, "(fly drone-3 ashcombe brindle-yard)"),
         (7, "(pick-up drone-3 crate-9 brindle-yard)")],
        []),

    "timed call style in a list": (text("""
        - 0: charge(drone-7, corran-pad) [20]
        - 20: fly(drone-7, corran-pad, ashcombe) [11.5]
        """), DRONE,
        [(1, "0: (charge drone-7 corran-pad) [20]"),
         (2, "20: (fly drone-7 corran-pad ashcombe) [11.5]")],
        []),

    "no plan at all": (text("""
        I could not find a plan: parcel-12 is not in any van's reach.
        """), COURIER, [], []),

    "an echoed goal is reported, the step is read": (text("""
        The goal is:
        (:goal (at parcel-1 quayside))
        My plan:
        (load parcel-1 van-1 lowmere-depot)
        """), COURIER,
        [(4, "(load parcel-1 van-1 lowmere-depot)")],
        [(2, "(:goal (at parcel-1 quayside))", "':goal' is not a valid name")]),

    "steps written as a chain with words between": (text("""
        ```
        (refuel van-2 lowmere-depot) then (drive van-2 lowmere-depot quayside)
        ```
        """), COURIER,
        [(2, "(refuel van-2 lowmere-depot)")],
        [(2, "(refuel van-2 lowmere-depot) then (drive van-2 lowmere-depot quayside)",
          "could not read the text after the step")]),
}


@pytest.mark.parametrize("case", sorted(CORPUS))
def test_corpus(case):
    answer, names, want_steps, want_unread = CORPUS[case]
    got_steps, got_unread = read(answer, names)
    assert got_steps == want_steps
    assert [(n, t) for n, t, _ in got_unread] == [(n, t) for n, t, _ in want_unread]
    for (_, _, reason), (_, _, words) in zip(got_unread, want_unread):
        assert words in reason


def test_corpus_is_big_enough():
    assert len(CORPUS) >= 12


# --- features one by one ---------------------------------------------------------------


@pytest.mark.parametrize("line", [
    "1. (load p v)", "12) (load p v)", "Step 3: (load p v)", "step 3. (load p v)",
    "- (load p v)", "* (load p v)", "+ (load p v)", "\u2022 (load p v)", "   - (load p v)",
    "1.(load p v)", "1. load(p, v)", "1. load(p,v)", "1. load p v", "- `load p v`",
    "**Step 1:** load(p, v)", "1. load('p', \"v\")", "1. LOAD P V",
])
def test_list_markers_and_step_styles(line):
    plan = extract_plan(line + "\n", COURIER).plan
    assert plan.steps == (PlanStep("load", ("p", "v"), line=1),)


@pytest.mark.parametrize("fence", ["```", "```pddl", "~~~", "```lisp  "])
def test_fences(fence):
    closing = fence[:3]
    answer = f"Plan below.\n{fence}\n(a x)\nb y\n{closing}\nafter\n"
    assert extract_plan(answer).plan == Plan.of("(a x)", "(b y)")


def test_unclosed_fence_runs_to_the_end():
    got = extract_plan("```\n(a x)\nnot a step!\n")
    assert got.plan == Plan.of("(a x)")
    assert [u.line for u in got.unread] == [3]


def test_tilde_fence_is_not_closed_by_backticks():
    assert extract_plan("~~~\n(a)\n```\n(b)\n~~~\n").plan == Plan.of("(a)", "(b)")


def test_prose_outside_lists_and_fences_is_ignored_silently():
    answer = "Here is my plan:\nload the van first, obviously.\nNote (see above): fine\n(a x)\nThis should work because x is free.\n"
    got = extract_plan(answer)
    assert got.plan == Plan.of("(a x)") and got.unread == ()


def test_stand_alone_call_lines_must_be_clean():
    got = extract_plan("load(p, v)\nfoo(x) is a helper we wrote\nload(p, v).\n")
    assert [s.line for s in got.plan] == [1, 3]
    assert got.unread == ()


def test_action_names_filter_bare_words_only():
    answer = "- pick a b\n- drop a\n- (jump a)\n- hop(a)\n"
    got = extract_plan(answer, ["pick"])
    assert [s.action for s in got.plan] == ["pick", "jump", "hop"]
    assert [(u.line, u.reason) for u in got.unread] == [(2, "'drop' is not one of the domain's actions")]
    # Without action names every bare-words item is a step.
    assert [s.action for s in extract_plan(answer).plan] == ["pick", "drop", "jump", "hop"]
    # Action names are matched without regard to case.
    assert extract_plan("- PICK a\n", ["Pick"]).plan == Plan.of("(pick a)")


def test_list_failures_count_only_in_lists_with_steps():
    prose_list = "- The van is ready.\n- We go at noon!\n"
    assert extract_plan(prose_list, COURIER) == Extraction(Plan(), ())
    plan_list = "- load p v\n- We go at noon!\n"
    got = extract_plan(plan_list, COURIER)
    assert [u.line for u in got.unread] == [2]


def test_a_list_survives_blank_and_indented_lines_but_not_prose():
    answer = "1. load p v\n\n   This frees the dock.\n2. lod p v\nSo that is it.\n- lod q v\n"
    got = extract_plan(answer, COURIER)
    assert [s.line for s in got.plan] == [1]
    # Line 4 is in the plan list (the indented line 3 does not end it); line 6 starts
    # a new list, which has no steps, so its failure is not reported.
    assert [u.line for u in got.unread] == [4]


def test_json_plan_in_one_line_and_in_object():
    doc = [{"action": "load", "args": ["p", "v"]}, {"action": "drive", "args": ["v", "a", "b"]}]
    for answer in (f"Plan: {json.dumps(doc)} -- done", json.dumps({"steps": doc}, indent=2)):
        assert extract_plan(answer).plan == Plan.of("(load p v)", "(drive v a b)")


def test_json_step_lines_follow_the_text():
    answer = '{\n  "steps": [\n    {"action": "a"},\n\n    {"action": "b"}\n  ]\n}\n(c)\n'
    assert [(s.action, s.line) for s in extract_plan(answer).plan] == [("a", 3), ("b", 5), ("c", 8)]


def test_json_steps_field_of_the_wrong_kind():
    got = extract_plan('{"steps": "load p v"}')
    assert got.plan == Plan() and "should be a list" in got.unread[0].reason


def test_broken_json_is_reported_once_and_swallows_its_lines():
    answer = '```json\n[\n  {"action": "a"},\n  {"action": "b",}\n]\n```\n(c)\n'
    got = extract_plan(answer)
    assert got.plan == Plan.of("(c)")
    assert [u.line for u in got.unread] == [4]
    assert "field name in double quotes" in got.unread[0].reason


def test_other_brackets_are_not_json_plans():
    assert extract_plan("(a x) [2]\n[1, 2, 3]\n{\"k\": 1}\n").plan == Plan(
        (PlanStep("a", ("x",), duration=2.0),))


def test_duration_and_time_forms():
    got = extract_plan("0.003: (load pkg1 van2) [2.5]\n1.5:(drive van2 a b)\n")
    assert [(s.time, s.duration) for s in got.plan] == [(0.003, 2.5), (1.5, None)]


def test_partly_read_line_keeps_its_good_steps():
    got = extract_plan("(a x) (b y\n")
    assert got.plan == Plan.of("(a x)")
    assert got.unread == (UnreadLine(1, "(a x) (b y", "missing closing ')'"),)


def test_remarks_after_steps_are_ignored():
    for line in ("(a x) ; why", "(a x) - frees x", "(a x) # why", "(a x) // why",
                 "(a x) \u2014 why", "(a x) so that x moves", "a(x) - frees x", "a(x) // why"):
        got = extract_plan(f"- {line}\n")
        assert got.plan == Plan.of("(a x)") and got.unread == (), line


def test_variables_and_bad_names_are_reported():
    got = extract_plan("```\n(pick ?x)\npick(a#b)\n```\n")
    assert [u.line for u in got.unread] == [2, 3]
    assert "variable" in got.unread[0].reason
    assert "'a#b' is not a valid name" in got.unread[1].reason


def test_unread_line_renders_for_feedback():
    u = UnreadLine(4, "  (drive van-1 depot ", "missing closing ')'")
    assert u.render() == "line 4: (drive van-1 depot -- missing closing ')'"


def test_extraction_is_frozen():
    got = extract_plan("(a)")
    with pytest.raises(AttributeError):
        got.plan = Plan()  # type: ignore[misc]


# --- agreement with the strict reader, and round trips ---------------------------------

names = st.builds(lambda head, tail: head + tail,
                  st.sampled_from("abcdefghijklmnopqrstuvwxyz"),
                  st.text(alphabet="abcdefghijklmnopqrstuvwxyz0123456789-_", max_size=10))
numbers = st.floats(min_value=0, max_value=1e12, allow_nan=False)


@st.composite
def plans(draw):
    timed = draw(st.booleans())
    return Plan(tuple(
        PlanStep(draw(names), tuple(draw(st.lists(names, max_size=3))),
                 draw(numbers) if timed else None, draw(st.none() | numbers))
        for _ in range(draw(st.integers(0, 6)))))


@settings(max_examples=FUZZ, deadline=None)
@given(plans())
def test_a_plan_file_reads_the_same_as_with_the_strict_reader(plan):
    answer = plan.to_text()
    got = extract_plan(answer)
    assert got.plan == read_plan(answer) == plan and got.unread == ()
    fenced = extract_plan("Here is my plan:\n```pddl\n" + answer + "```\nDone.\n")
    assert fenced.plan == plan
    assert [s.line for s in fenced.plan] == list(range(3, 3 + len(plan)))


@settings(max_examples=FUZZ, deadline=None)
@given(plans(), st.sampled_from(["call", "numbered", "json"]))
def test_other_styles_round_trip(plan, style):
    if style == "json":
        answer = "Plan:\n" + json.dumps([{"action": s.action, "args": list(s.args), "time": s.time,
                                         "duration": s.duration} for s in plan], indent=1)
    else:
        lines = []
        for i, s in enumerate(plan, start=1):
            if style == "call":
                body = f"{s.action}({', '.join(s.args)})"
                body = (f"{s.time!r}: " if s.time is not None else "") + body
                body += f" [{s.duration!r}]" if s.duration is not None else ""
            else:
                body = s.to_line()
            lines.append(f"{i}. {body}")
        answer = "Steps:\n" + "\n".join(lines) + "\nThat is all.\n"
    got = extract_plan(answer)
    assert got.plan == plan and got.unread == ()


# --- fuzz: extraction never raises ------------------------------------------------------

answer_alphabet = list("()[]{};:.,-*+#`'\"0123456789 \t\nabcXYZ_?\u2022\u2014\u2192") + \
    ["```", "step 1:", "1. ", "- ", '{"action": "', '"args": [', '{"steps": [', "~~~"]


@pytest.mark.slow
@settings(max_examples=FUZZ, deadline=None)
@given(st.one_of(st.text(max_size=400),
                 st.lists(st.sampled_from(answer_alphabet), max_size=120).map("".join)),
       st.none() | st.lists(st.sampled_from(["a", "load", "pick-up", "X"]), max_size=3))
def test_extract_never_raises(answer, names):
    got = extract_plan(answer, names)
    lines = answer.splitlines()
    for step in got.plan:
        assert 1 <= step.line <= len(lines)
    for u in got.unread:
        assert 1 <= u.line <= len(lines) and u.text == lines[u.line - 1] and u.reason


# The clean-answer shortcut must read exactly what the general reader reads. Lines are
# drawn from step lines, prose, list items, fences, calls and JSON, so both the answers
# the shortcut takes and those it hands on are covered.
_answer_lines = st.sampled_from([
    "(pick-up b1)", "  (stack b1 b2)  ", "(put-down B3) ; tidy", "(unstack b1)", "",
    "Here is the plan:", "I hope this helps.", "Step 1: pick up", "1. (pick-up b1)",
    "- (stack b1 b2)", "pick-up(b1)", "```", "0.5: (fly a) [2]", '[{"action": "x"}]',
    "(pick-up b1", "** done **", "~~~", "Note: 3 steps", "* bullet", "(a)(b)",
])


@settings(max_examples=600, deadline=None)
@given(st.lists(_answer_lines, max_size=12))
def test_clean_answer_shortcut_reads_what_the_general_reader_reads(lines):
    from plansieve.adapters import extract as ex
    text = "\n".join(lines)
    fast = ex._plain_answer(text)
    if fast is not None:
        slow = ex._extract(text, None)
        assert fast == slow
        assert [s.line for s in fast.plan.steps] == [s.line for s in slow.plan.steps]
