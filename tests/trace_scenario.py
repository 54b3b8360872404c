"""A recorded run of our own invention, shared by the trace and replay tests.

A ferry company's crossings between Quillon and Marrow Isle: rejected once, then verified.
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

from plansieve.adapters.guesser import Usage
from plansieve.critics.verdict import GoalUnmet, Hint, Verdict
from plansieve.loop.events import (
    BudgetLimit, CriticRef, FeedbackGiven, GuessAsked, GuesserRef, GuessFailed, GuessReceived,
    PlanRead, RunFinished, RunStarted, TaskRef, Totals, UnreadLine, VerdictGiven,
)
from plansieve.loop.trace import TraceWriter

KEY = b"quillon-harbour-office-key-2031"
PLAN = "(board ferry2 quillon)\n(sail ferry2 quillon marrow-isle)\n(dock ferry2 marrow-isle)"


def ticking():
    """A clock that moves 1 ms per call, so traces are reproducible."""
    now = [datetime(2031, 4, 2, 9, 15, tzinfo=timezone.utc)]

    def clock():
        now[0] += timedelta(milliseconds=1)
        return now[0]
    return clock


def run_events(secret: str = "") -> list:
    """A two-round run: rejected once, then verified. ``secret`` is planted everywhere."""
    s = f" {secret}" if secret else ""
    task = TaskRef.from_texts(domain="ferry-lines", problem=f"morning-crossings{s}",
                              task_id="fl-7", domain_text="(define (domain ferry-lines))",
                              problem_text="(define (problem morning-crossings))")
    miss = GoalUnmet(message=f"goal (docked ferry2 marrow-isle) is false{s}",
                     condition="(docked ferry2 marrow-isle)",
                     hints=[Hint(action="dock", args=["ferry2", "marrow-isle"],
                                 effect=f"(docked ferry2 marrow-isle){s}")])
    rejected = Verdict(critic="plan-simulator", version="1", sound=True, passed=False,
                       findings=[miss], steps_checked=2)
    advisory = Verdict(critic="style", version="0.2", sound=False, passed=True)
    accepted = Verdict(critic="plan-simulator", version="1", sound=True, passed=True,
                       steps_checked=3)
    return [
        RunStarted(task=task,
                   critics=[CriticRef(name="plan-simulator", version="1", sound=True,
                                      role="sound"),
                            CriticRef(name="style", version="0.2", sound=False,
                                      role="advisory")],
                   guesser=GuesserRef(name="remote", settings={"endpoint": f"https://x.example{s}",
                                                               f"header{s}": "v", "width": 3}),
                   budget=[BudgetLimit(limit="rounds", value=4),
                           BudgetLimit(limit="cost", value=0.25)],
                   feedback_level="hints", chain_mode="all", seed=11),
        GuessAsked(round=1, feedback="", history=0, settings={"temperature": 0.3}),
        GuessReceived(round=1, text=f"(board ferry2 quillon)\n(sail ferry2 quillon marrow-isle){s}",
                      usage=Usage(input_tokens=410, output_tokens=38, cost=0.0021, seconds=1.25),
                      prompt=f"Plan the crossing.{s}"),
        PlanRead(round=1, steps=["(board ferry2 quillon)", "(sail ferry2 quillon marrow-isle)"],
                 unread=[UnreadLine(line=3, text=f"and then rest{s}", reason="not a step")]),
        VerdictGiven(round=1, verdict=rejected, role="sound"),
        FeedbackGiven(round=1, level="hints", text=f"The ferry never docks.{s}", findings=[miss]),
        GuessAsked(round=2, feedback=f"The ferry never docks.{s}", history=1),
        GuessFailed(round=2, attempt=1, reason=f"timed out{s}", retry=True, wait_seconds=0.5),
        GuessReceived(round=2, text=PLAN, usage=Usage(input_tokens=455, output_tokens=51,
                                                      cost=0.0024, seconds=1.5)),
        PlanRead(round=2, steps=PLAN.splitlines()),
        VerdictGiven(round=2, verdict=accepted, role="sound"),
        VerdictGiven(round=2, verdict=advisory, role="advisory"),
        RunFinished(verified=True, stop="verified", detail=f"accepted in round 2{s}", rounds=2,
                    totals=Totals(guesser_calls=3, input_tokens=865, output_tokens=89,
                                  cost=0.0045, seconds=4.0),
                    plan=PLAN + " ; pier \u00f1"),
    ]


def write_run(sinks, *, key=None, redact=None, run_id="crossing-7", events=None) -> TraceWriter:
    writer = TraceWriter(sinks, run_id=run_id, hmac_key=key, redact=redact, clock=ticking())
    with writer:
        for event in events if events is not None else run_events():
            writer.emit(event)
    return writer
