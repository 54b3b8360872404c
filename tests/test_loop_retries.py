"""Retried tries inside one round: the loop's side of the contract.

A guesser that retries reports each failed try through ``request.retrying``; the loop
writes it to the trace as a ``guess-failed`` event with ``retry`` true, counts it as a
call (not a round) and charges what it cost to the budget. Plans come from the harbour
demo (our own scenario).
"""

from __future__ import annotations

import asyncio
from pathlib import Path

from plansieve.adapters.guesser import Guess, GuesserFailed, RetryNote, Usage
from plansieve.adapters.replay import ReplayGuesser
from plansieve.critics.pddl import load_task
from plansieve.loop.budget import at_most_rounds, at_most_tokens
from plansieve.loop.engine import sieve
from plansieve.loop.trace import MemorySink, TraceWriter

HARBOUR = Path(__file__).resolve().parents[1] / "examples" / "harbour"
TASK = load_task(HARBOUR / "domain.pddl", HARBOUR / "problem.pddl")
GOOD = (HARBOUR / "plan-good.plan").read_text()


class Flaky:
    """Fails ``fails`` tries of every round (each costing 7 input tokens), then answers."""

    name = "flaky"

    def __init__(self, fails: int, answer: str = GOOD, give_up: bool = False) -> None:
        self.fails, self.answer, self.give_up = fails, answer, give_up

    def describe(self):
        return {"fails": self.fails}

    async def guess(self, request):
        for attempt in range(1, self.fails + 1):
            request.retrying(RetryNote(attempt=attempt, reason=f"try {attempt} refused",
                                       wait_seconds=0.0, usage=Usage(input_tokens=7)))
        if self.give_up:
            raise GuesserFailed("no more tries", guesser=self.name, attempt=self.fails + 1)
        return Guess(text=self.answer, usage=Usage(input_tokens=10, output_tokens=5),
                     attempt=self.fails + 1)


def run(guesser, budget=None):
    sink = MemorySink()
    trace = TraceWriter(sink, run_id="retry-run")
    outcome = asyncio.run(sieve(TASK, guesser, budget=budget or at_most_rounds(3), trace=trace))
    return outcome, sink.events


def test_retries_are_calls_not_rounds_and_their_usage_counts():
    outcome, events = run(Flaky(2))
    assert outcome.verified and outcome.rounds == 1
    assert outcome.totals.guesser_calls == 3
    assert outcome.totals.input_tokens == 2 * 7 + 10
    failed = [e for e in events if e["kind"] == "guess-failed"]
    assert [(e["attempt"], e["retry"]) for e in failed] == [(1, True), (2, True)]
    assert [e["usage"]["input_tokens"] for e in failed] == [7, 7]
    received = [e for e in events if e["kind"] == "guess-received"]
    assert received[0]["attempt"] == 3


def test_final_failure_names_the_last_try():
    outcome, events = run(Flaky(2, give_up=True))
    assert outcome.stop == "guesser-failed" and outcome.detail == "no more tries"
    last = [e for e in events if e["kind"] == "guess-failed"][-1]
    assert (last["attempt"], last["retry"]) == (3, False)
    assert outcome.totals.guesser_calls == 3


def test_usage_of_failed_tries_spends_the_token_budget():
    # Each round: two failed tries of 7 tokens and an answer of 15 -> 29 tokens a round.
    outcome, _ = run(Flaky(2, answer="(no plan here)"), budget=at_most_tokens(50))
    assert outcome.stop == "tokens" and outcome.rounds == 2


def test_replay_reports_the_recorded_retries_again():
    first, events = run(Flaky(2))
    replayed, events2 = run(ReplayGuesser.from_events(events))
    assert replayed.totals.guesser_calls == first.totals.guesser_calls
    assert replayed.totals.input_tokens == first.totals.input_tokens
    kinds = [(e["kind"], e.get("attempt")) for e in events2 if e["kind"].startswith("guess-")]
    assert kinds == [(e["kind"], e.get("attempt")) for e in events if e["kind"].startswith("guess-")]


def test_retries_do_not_use_up_the_rounds_budget():
    # Three failed tries a round and a two-round budget: both rounds are still asked.
    outcome, _ = run(Flaky(3, answer="(no plan here)"), budget=at_most_rounds(2))
    assert outcome.stop == "rounds" and outcome.rounds == 2
    assert outcome.totals.rounds == 2 and outcome.totals.guesser_calls == 8
