"""The generate-and-test loop: rounds, budgets, chain roles, feedback, cancellation, traces.

The plans judged here come from the harbour demo (examples/harbour, our own scenario);
whether a plan is valid is decided by the plan simulator, which is itself checked
against an outside oracle in test_oracle_differential.py.
"""

from __future__ import annotations

import asyncio
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from plansieve.adapters.guesser import Guess, GuesserFailed, Usage
from plansieve.critics.pddl import load_task
from plansieve.critics.plan_text import read_plan
from plansieve.critics.simulator import PlanSimulator
from plansieve.critics.verdict import Verdict
from plansieve.loop.budget import (
    at_most_cost, at_most_rounds, at_most_seconds, at_most_tokens, budget_of,
)
from plansieve.loop.chain import CriticChain, advisory
from plansieve.loop.engine import sieve, sieve_sync
from plansieve.loop.feedback import LEVELS, compose_feedback
from plansieve.loop.trace import MemorySink, TraceWriter

HARBOUR = Path(__file__).resolve().parents[1] / "examples" / "harbour"
TASK = load_task(HARBOUR / "domain.pddl", HARBOUR / "problem.pddl")
GOOD = (HARBOUR / "plan-good.plan").read_text()
BROKEN = (HARBOUR / "plan-broken.plan").read_text()
GOOD_STEPS = [l for l in GOOD.splitlines() if l.startswith("(")]


class Listed:
    """Answers from a list, one per round; records what it was asked."""

    name = "listed"

    def __init__(self, answers, usage: Usage = Usage(), delay: float = 0.0) -> None:
        self.answers = list(answers)
        self.usage = usage
        self.delay = delay
        self.requests = []
        self.cancelled = False

    def describe(self):
        return {"answers": len(self.answers)}

    async def guess(self, request):
        self.requests.append(request)
        if self.delay:
            try:
                await asyncio.sleep(self.delay)
            except asyncio.CancelledError:
                self.cancelled = True
                raise
        if request.round > len(self.answers):
            raise GuesserFailed("no more answers")
        return Guess(text=self.answers[request.round - 1], usage=self.usage)


def _trace():
    sink = MemorySink()
    return sink, TraceWriter(sink, run_id="test-run")


def test_verified_in_the_round_the_good_plan_arrives():
    sink, trace = _trace()
    g = Listed([BROKEN, "I could not decide.", GOOD])
    out = sieve_sync(TASK, g, budget=at_most_rounds(5), trace=trace)
    assert out.verified and out.stop == "verified" and out.rounds == 3
    assert read_plan(out.plan_text).steps == read_plan(GOOD).steps
    assert [s.accepted for s in out.summaries] == [False, False, True]
    assert out.summaries[1].steps == 0
    kinds = [e["kind"] for e in sink.events]
    assert kinds[0] == "run-started" and kinds[-1] == "run-finished"
    assert kinds.count("guess-received") == 3 and kinds.count("feedback") == 2
    # the guesser saw the feedback on its earlier answers, in order
    assert [len(r.history) for r in g.requests] == [0, 1, 2]
    assert "argument 2 'north-berth'" in g.requests[1].feedback


def test_rounds_budget_names_itself():
    out = sieve_sync(TASK, Listed([BROKEN] * 9), budget=at_most_rounds(3))
    assert not out.verified and out.stop == "rounds" and out.rounds == 3


def test_time_budget_cuts_off_the_call_in_flight():
    g = Listed([GOOD], delay=30)
    out = sieve_sync(TASK, g, budget=at_most_seconds(0.2) | at_most_rounds(5))
    assert out.stop == "seconds" and not out.verified
    assert g.cancelled  # the slow call was cancelled, not waited for


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tokens=st.lists(st.integers(0, 500), min_size=1, max_size=12),
       limit=st.integers(1, 2000))
def test_token_budget_overspent_by_at_most_the_call_in_flight(tokens, limit):
    class Costly(Listed):
        async def guess(self, request):
            n = tokens[(request.round - 1) % len(tokens)]
            return Guess(text=BROKEN, usage=Usage(input_tokens=n, cost=n / 1000))

    out = sieve_sync(TASK, Costly([]), budget=at_most_tokens(limit) | at_most_rounds(30))
    used = [s.usage.tokens for s in out.summaries]
    assert sum(used) - (used[-1] if used else 0) < limit
    if out.stop == "tokens":
        assert sum(used) >= limit
    cost = sieve_sync(TASK, Costly([]), budget=at_most_cost(limit / 1000) | at_most_rounds(30))
    spent = [s.usage.cost for s in cost.summaries]
    assert sum(spent) - (spent[-1] if spent else 0) < limit / 1000 + 1e-12


def test_budget_composition_and_errors():
    b = at_most_rounds(3) | at_most_seconds(10) | at_most_cost(2)
    assert [d["limit"] for d in b.describe()] == ["rounds", "seconds", "cost"]
    assert str(budget_of(rounds=2, tokens=100)) == "rounds 2 | tokens 100"
    for bad in (0, -1, float("nan"), "3", True):
        with pytest.raises(ValueError):
            at_most_seconds(bad)
    with pytest.raises(ValueError):
        at_most_rounds(2.5)
    with pytest.raises(ValueError):
        budget_of()


class Always:
    """A critic with a fixed answer, for testing roles."""

    version = "1"

    def __init__(self, name, passed, sound=True):
        self.name, self.passed, self.sound = name, passed, sound

    def check(self, task, plan):
        return Verdict(critic=self.name, version="1", sound=self.sound, passed=self.passed)


def test_advisory_critic_never_blocks_and_never_accepts():
    chain = CriticChain([PlanSimulator(), advisory(Always("style", False, sound=False))])
    out = sieve_sync(TASK, Listed([GOOD]), critics=chain)
    assert out.verified
    with pytest.raises(ValueError, match="at least one sound critic"):
        CriticChain([advisory(Always("style", True, sound=False))])
    with pytest.raises(ValueError, match="can only be advisory"):
        CriticChain([PlanSimulator(), __import__("plansieve.loop.chain").loop.chain.Link(
            Always("judge", True, sound=False), "sound")])


def test_a_sound_critic_that_rejects_blocks_a_valid_plan():
    chain = CriticChain([PlanSimulator(), Always("strict", False)])
    out = sieve_sync(TASK, Listed([GOOD] * 3), critics=chain, budget=at_most_rounds(3))
    assert not out.verified and out.summaries[0].failed == ["strict"]


def test_stop_at_first_failure_or_run_all():
    seen = []

    class Counting(Always):
        def check(self, task, plan):
            seen.append(self.name)
            return super().check(task, plan)

    chain = CriticChain([Counting("a", False), Counting("b", True)])
    sieve_sync(TASK, Listed([GOOD]), critics=chain, budget=at_most_rounds(1))
    assert seen == ["a"]
    seen.clear()
    chain = CriticChain([Counting("a", False), Counting("b", True)], run_all=True)
    sieve_sync(TASK, Listed([GOOD]), critics=chain, budget=at_most_rounds(1))
    assert seen == ["a", "b"]


def test_unreadable_step_lines_block_acceptance_and_are_fed_back():
    answer = GOOD + "(drive carrier-7 north-berth\n"
    out = sieve_sync(TASK, Listed([answer, GOOD]), budget=at_most_rounds(3))
    assert out.rounds == 2 and out.summaries[0].unread == 1
    assert "could not be read" in out.summaries[0].feedback


def test_a_plan_written_twice_is_read_once():
    fenced = GOOD + "\nThe same in a block:\n```\n" + GOOD + "```\n"
    out = sieve_sync(TASK, Listed([fenced]), budget=at_most_rounds(1))
    assert out.verified and len(out.plan.steps) == len(GOOD_STEPS)


def test_guesser_failures_end_the_run_cleanly():
    sink, trace = _trace()
    out = sieve_sync(TASK, Listed([BROKEN]), budget=at_most_rounds(5), trace=trace)
    assert out.stop == "guesser-failed" and "no more answers" in out.detail

    class Buggy(Listed):
        async def guess(self, request):
            raise KeyError("oops")

    out = sieve_sync(TASK, Buggy([]), budget=at_most_rounds(5))
    assert out.stop == "guesser-failed" and "KeyError" in out.detail


def test_cancellation_leaves_a_closed_trace():
    sink, trace = _trace()

    async def main():
        task = asyncio.ensure_future(sieve(TASK, Listed([GOOD], delay=30), trace=trace))
        await asyncio.sleep(0.05)
        task.cancel()
        with pytest.raises(asyncio.CancelledError):
            await task

    asyncio.run(main())
    last = sink.events[-1]
    assert last["kind"] == "run-finished" and last["stop"] == "cancelled"


def test_hundreds_of_runs_share_one_event_loop_and_one_guesser():
    answers = [[BROKEN] * (i % 4) + [GOOD] for i in range(200)]

    class PerTask:
        name = "per-task"

        def describe(self):
            return {}

        async def guess(self, request):
            await asyncio.sleep(0.001 * (hash(request.task_id) % 5))
            got = answers[int(request.task_id)]
            return Guess(text=got[min(request.round, len(got)) - 1])

    async def main():
        g = PerTask()
        return await asyncio.gather(*[
            sieve(TASK, g, task_id=str(i), budget=at_most_rounds(6)) for i in range(200)])

    outs = asyncio.run(main())
    assert all(o.verified for o in outs)
    assert [o.rounds for o in outs] == [i % 4 + 1 for i in range(200)]
    assert len({o.run_id for o in outs}) == 200


# -- the property the whole product rests on ------------------------------------------

_lines = st.sampled_from(GOOD_STEPS + [
    "(drive carrier-7 east-stack west-stack)", "(recharge carrier-7 west-stack)",
    "(inspect crate-31 customs-bay)", "(fly carrier-7)", "(lift carrier-7 crate-31)"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(answers=st.lists(st.lists(_lines, max_size=14).map("\n".join), min_size=1, max_size=4),
       level=st.sampled_from(LEVELS))
def test_the_loop_never_accepts_a_plan_a_sound_critic_rejects(answers, level):
    out = sieve_sync(TASK, Listed(answers + [GOOD]), feedback=level,
                     budget=at_most_rounds(len(answers) + 1))
    assert out.verified  # the last answer is valid
    # Source of truth outside the loop: an independent plan simulator run on the result.
    assert PlanSimulator().check(TASK, out.plan).passed
    for s, text in zip(out.summaries, answers):
        if s.accepted:
            assert PlanSimulator().check(TASK, read_plan(text)).passed


def test_feedback_levels_say_more_as_they_go_up():
    v = PlanSimulator(keep_going=True).check(TASK, read_plan(BROKEN))
    notes = [compose_feedback(level, [("sound", v)]) for level in LEVELS]
    sizes = [len(n.text) for n in notes]
    assert sizes == sorted(sizes) and len(set(sizes)) == 4
    assert notes[0].findings == [] and len(notes[1].findings) == 1
    assert len(notes[2].findings) == len(v.findings) >= 2
    assert "could be fixed by" in notes[3].text and "could be fixed by" not in notes[2].text
    # deterministic: the same verdicts give the same words
    assert compose_feedback("all-with-fixes", [("sound", v)]).text == notes[3].text
    with pytest.raises(ValueError):
        compose_feedback("everything", [("sound", v)])


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(answers=st.lists(st.lists(_lines, max_size=14).map("\n".join), min_size=1, max_size=5),
       level=st.sampled_from(LEVELS), rounds=st.integers(1, 6),
       ends=st.sampled_from(["good", "nothing", "fail"]))
def test_the_trace_of_any_run_replays_to_the_same_outcome(answers, level, rounds, ends):
    from plansieve.adapters.replay import ReplayGuesser
    from plansieve.loop.trace_read import verify_trace_bytes

    script = answers + ([GOOD] if ends == "good" else [])
    sink, trace = _trace()
    first = sieve_sync(TASK, Listed(script), feedback=level, budget=at_most_rounds(rounds),
                       trace=trace)
    assert verify_trace_bytes(sink.content()).intact
    again = sieve_sync(TASK, ReplayGuesser.from_events(sink.events), feedback=level,
                       budget=at_most_rounds(rounds))
    assert (again.verified, again.stop, again.rounds, again.plan_text) == \
        (first.verified, first.stop, first.rounds, first.plan_text)
    assert [(s.codes, s.feedback) for s in again.summaries] == \
        [(s.codes, s.feedback) for s in first.summaries]
