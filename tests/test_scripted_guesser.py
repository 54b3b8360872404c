"""The scripted guesser: answers written in advance, one per round.

Behaviour checked against the guesser protocol (adapters/guesser.py) and the plan
simulator; the answers below are plans for the harbour demo (our own invented
scenario), valid or not as the simulator says.
"""

from __future__ import annotations

import asyncio
from pathlib import Path

import pytest

from plansieve.adapters.extract import extract_plan
from plansieve.adapters.guesser import Guesser, GuesserFailed, GuessRequest, Usage
from plansieve.adapters.scripted import ScriptedGuesser
from plansieve.critics.pddl import load_task
from plansieve.critics.simulator import PlanSimulator

HARBOUR = Path(__file__).resolve().parent.parent / "examples" / "harbour"
TASK = load_task(str(HARBOUR / "domain.pddl"), str(HARBOUR / "problem.pddl"))
GOOD = (HARBOUR / "plan-good.plan").read_text()
BROKEN = (HARBOUR / "plan-broken.plan").read_text()


def ask(guesser, round_: int):
    return asyncio.run(guesser.guess(GuessRequest(TASK, round_)))


def test_answers_come_in_round_order_then_the_script_ends():
    g = ScriptedGuesser([BROKEN, "Here you go:\n\n" + GOOD])
    assert isinstance(g, Guesser) and g.name == "scripted"
    assert g.describe() == {"answers": 2, "usages": False}
    first, second = ask(g, 1), ask(g, 2)
    assert first.text == BROKEN and second.text.endswith(GOOD)
    # The harbour demo's broken plan fails and the good one passes (examples/harbour).
    sim = PlanSimulator()
    assert not sim.check(TASK, extract_plan(first.text).plan).passed
    assert sim.check(TASK, extract_plan(second.text).plan).passed
    with pytest.raises(GuesserFailed, match="script exhausted") as err:
        ask(g, 3)
    assert err.value.guesser == "scripted"
    with pytest.raises(GuesserFailed, match="start at 1"):
        ask(g, 0)


def test_usage_given_or_estimated():
    given = [Usage(input_tokens=10, output_tokens=3, cost=0.02, seconds=1.5),
             Usage(input_tokens=12, output_tokens=4, cost=0.03, seconds=2.0)]
    g = ScriptedGuesser(["(a)", "(b)"], usages=given)
    assert [ask(g, r).usage for r in (1, 2)] == given
    plain = ask(ScriptedGuesser([GOOD]), 1).usage
    # Estimated: words of the answer (the plan-good file has 12 steps and a comment).
    assert plain.output_tokens == len(GOOD.split()) and plain.cost == 0 and plain.seconds >= 0


def test_bad_scripts_are_refused():
    with pytest.raises(ValueError, match="one Usage per answer"):
        ScriptedGuesser(["(a)"], usages=[])
    with pytest.raises(TypeError, match="list of answer texts"):
        ScriptedGuesser("(a)")


def test_an_empty_script_fails_at_once():
    with pytest.raises(GuesserFailed, match="holds 0 answer"):
        ask(ScriptedGuesser([]), 1)


def test_shared_by_many_loops_at_once():
    # The answer depends on the round alone, so concurrent loops never disturb each other.
    g = ScriptedGuesser(["one", "two", "three"])

    async def many():
        reqs = [GuessRequest(TASK, 1 + i % 3) for i in range(200)]
        return await asyncio.gather(*(g.guess(r) for r in reqs))

    got = asyncio.run(many())
    assert [x.text for x in got] == [("one", "two", "three")[i % 3] for i in range(200)]
