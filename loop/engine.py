"""The generate-and-test loop: ask, read, judge, feed back — until verified or out of budget.

``sieve`` is the async core; ``sieve_sync`` runs it to completion for callers without
an event loop. A run keeps all of its state in local variables and in the objects it
is given, so hundreds of runs can share one event loop (and one guesser) at once.

Each round: check the budget; ask the guesser (cut off when the time budget ends);
read the plan out of its text; run the critic chain; stop if every sound critic
passed, else compose feedback and go again. Every step is appended to the trace
as it happens, and a run that is cancelled still writes its closing event.
"""

from __future__ import annotations

import asyncio
import math
import time
import uuid
from collections.abc import Callable, Sequence

from plansieve.adapters.extract import extract_plan
from plansieve.adapters.guesser import (
    Attempt, Guess, Guesser, GuesserFailed, GuessRequest, RetryNote, Usage,
)
from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.protocol import Critic
from plansieve.loop.budget import Budget, Prices, at_most_rounds
from plansieve.loop.chain import CriticChain, Link
from plansieve.loop.events import (
    BudgetLimit, CriticRef, FeedbackGiven, GuessAsked, GuesserRef, GuessFailed, GuessReceived,
    PlanRead, RunFinished, RunStarted, Totals, UnreadLine, VerdictGiven,
)
from plansieve.loop.feedback import FeedbackLevel, UnreadNote, compose_feedback
from plansieve.loop.fingerprint import task_ref
from plansieve.loop.outcome import Outcome, RoundSummary


def default_chain(task: Task) -> CriticChain:
    """The plan simulator, plus the resource counter and deadline checker when the task
    has anything for them to check."""
    from plansieve.critics.select import critics_for
    return CriticChain(critics_for(task))


def _chain_of(critics: CriticChain | Sequence[Critic | Link] | None, task: Task) -> CriticChain:
    if critics is None:
        return default_chain(task)
    if isinstance(critics, CriticChain):
        return critics
    return CriticChain(critics)


def _collapse_repeat(plan: Plan) -> Plan:
    """One copy of a plan written twice in one answer (a list and then a code fence)."""
    steps = plan.steps
    n = len(steps)
    if n and n % 2 == 0:
        half = n // 2
        if all((a.action, a.args, a.time, a.duration) == (b.action, b.args, b.time, b.duration)
               for a, b in zip(steps[:half], steps[half:])):
            return Plan(steps[:half], plan.source)
    return plan


class _Run:
    """The state of one run; nothing here is shared with other runs."""

    def __init__(self, task: Task, guesser: Guesser, chain: CriticChain, level: FeedbackLevel,
                 budget: Budget, trace, task_id: str, seed: int | None, prices: Prices | None,
                 on_round: Callable[[RoundSummary], None] | None, settings: dict) -> None:
        self.task, self.guesser, self.chain, self.level = task, guesser, chain, level
        self.budget, self.trace, self.task_id, self.seed = budget, trace, task_id, seed
        self.prices, self.on_round, self.settings = prices, on_round, settings
        self.run_id = getattr(trace, "run_id", None) or uuid.uuid4().hex
        # what the run has used so far; ``totals()`` reads it with the time
        self.rounds = self.calls = self.input_tokens = self.output_tokens = 0
        self.cost = 0.0
        self.history: list[Attempt] = []
        self.summaries: list[RoundSummary] = []
        self.started = time.monotonic()
        self.actions = frozenset(task.domain.actions) | frozenset(task.domain.durative_actions)
        self.finished = False

    def emit(self, event) -> None:
        if self.trace is not None:
            self.trace.emit(event)

    def totals(self) -> Totals:
        return Totals(rounds=self.rounds, guesser_calls=self.calls, input_tokens=self.input_tokens,
                      output_tokens=self.output_tokens, cost=self.cost,
                      seconds=time.monotonic() - self.started)

    def finish(self, stop: str, detail: str, plan: Plan | None = None) -> Outcome:
        verified = stop == "verified"
        plan_text = plan.to_text() if plan is not None else None
        totals = self.totals()
        self.finished = True
        self.emit(RunFinished(verified=verified, stop=stop, detail=detail,
                              rounds=len(self.summaries), totals=totals, plan=plan_text))
        return Outcome(run_id=self.run_id, verified=verified, stop=stop, detail=detail,
                       rounds=len(self.summaries), plan_text=plan_text,
                       summaries=self.summaries, totals=totals)

    def start(self) -> None:
        self.emit(RunStarted(
            task=task_ref(self.task, self.task_id),
            critics=[CriticRef(**c) for c in self.chain.describe()],
            guesser=GuesserRef(name=self.guesser.name, settings=self.guesser.describe()),
            budget=[BudgetLimit(**b) for b in self.budget.describe()],
            feedback_level=self.level, chain_mode=self.chain.mode, seed=self.seed))

    async def ask(self, number: int) -> Guess | Outcome:
        """The guesser's answer, or the outcome that ends the run instead."""
        left = self.budget.seconds_left(self.totals())

        def retrying(note: RetryNote) -> None:
            # A retry is one more call, not one more round; what it cost counts.
            self.calls += 1
            usage = self.charge(note.usage)
            self.emit(GuessFailed(round=number, attempt=note.attempt, reason=note.reason,
                                  retry=True, wait_seconds=note.wait_seconds, usage=usage))

        request = GuessRequest(task=self.task, round=number, history=tuple(self.history),
                               task_id=self.task_id, settings=self.settings,
                               deadline=None if math.isinf(left) else time.monotonic() + left,
                               on_retry=retrying)
        self.emit(GuessAsked(round=number, feedback=request.feedback,
                             history=len(self.history), settings=self.settings))
        self.rounds += 1
        self.calls += 1
        try:
            if math.isinf(left):
                return await self.guesser.guess(request)
            return await asyncio.wait_for(self.guesser.guess(request), timeout=left)
        except asyncio.TimeoutError:
            limit = next((b for b in self.budget.limits() if b.kind == "seconds"), None)
            return self.finish("seconds", f"the time budget of {limit.value:g} s ran out "
                                          f"while waiting for round {number}'s answer")
        except GuesserFailed as e:
            reason, attempt = e.reason, e.attempt
        except asyncio.CancelledError:
            raise
        except Exception as e:  # a guesser's own bug still ends the run cleanly
            reason, attempt = f"the guesser raised {type(e).__name__}: {e}", 1
        self.emit(GuessFailed(round=number, attempt=attempt, reason=reason, retry=False))
        return self.finish("guesser-failed", reason)

    def charge(self, usage: Usage) -> Usage:
        if not usage.cost and self.prices is not None:
            usage = usage.model_copy(
                update={"cost": self.prices.cost(usage.input_tokens, usage.output_tokens)})
        self.input_tokens += usage.input_tokens
        self.output_tokens += usage.output_tokens
        self.cost += usage.cost
        return usage

    async def go(self) -> Outcome:
        self.start()
        number = 0
        while True:
            hit = self.budget.used_up(self.totals())
            if hit is not None:
                return self.finish(hit.kind, f"the {hit.kind} budget of {hit.value:g} was used "
                                             f"up after {len(self.summaries)} round(s)")
            number += 1
            round_started = time.monotonic()
            answer = await self.ask(number)
            if isinstance(answer, Outcome):
                return answer
            usage = self.charge(answer.usage)
            self.emit(GuessReceived(round=number, text=answer.text, usage=usage,
                                    prompt=answer.prompt, attempt=answer.attempt))
            result = self.judge(number, answer.text, usage, round_started)
            if result is not None:
                return result

    def judge(self, number: int, text: str, usage: Usage, round_started: float) -> Outcome | None:
        """Read and check one answer; the outcome if it was accepted, else None."""
        extraction = extract_plan(text, self.actions)
        plan = _collapse_repeat(extraction.plan)
        unread = [UnreadNote(line=u.line, text=u.text, reason=u.reason) for u in extraction.unread]
        self.emit(PlanRead(round=number, steps=[s.to_line() for s in plan.steps],
                           unread=[UnreadLine(**u.model_dump()) for u in unread]))
        verdicts = []
        accepted = False
        if plan.steps:
            result = self.chain.run(self.task, plan)
            verdicts = result.verdicts
            for role, v in verdicts:
                self.emit(VerdictGiven(round=number, verdict=v, role=role))
            # An answer with unreadable step lines is never accepted: the plan read may
            # be missing exactly the steps that could not be read.
            accepted = result.accepted and not unread
        failed = [v.critic for role, v in verdicts if role == "sound" and not v.passed]
        codes = [f.code for role, v in verdicts if role == "sound" for f in v.findings]
        note = None
        if not accepted:
            note = compose_feedback(self.level, verdicts, unread=unread, no_steps=not plan.steps)
            self.emit(FeedbackGiven(round=number, level=note.level, text=note.text,
                                    findings=note.findings))
            self.history.append(Attempt(round=number, text=text, feedback=note.text,
                                        findings=tuple(note.findings)))
        summary = RoundSummary(round=number, steps=len(plan.steps), unread=len(unread),
                               accepted=accepted, failed=failed, codes=codes,
                               feedback=note.text if note else None, usage=usage,
                               seconds=time.monotonic() - round_started)
        self.summaries.append(summary)
        if self.on_round is not None:
            self.on_round(summary)
        if accepted:
            return self.finish("verified", f"every sound critic passed the plan of round {number}",
                               plan)
        return None


async def sieve(task: Task, guesser: Guesser, *,
                critics: CriticChain | Sequence[Critic | Link] | None = None,
                feedback: FeedbackLevel = "all-with-fixes",
                budget: Budget | None = None,
                trace=None,
                task_id: str = "task",
                seed: int | None = None,
                prices: Prices | None = None,
                on_round: Callable[[RoundSummary], None] | None = None,
                settings: dict | None = None) -> Outcome:
    """Propose plans with ``guesser`` and check them with ``critics`` until one is verified.

    Returns an :class:`Outcome`: ``verified`` with the plan, or the reason it stopped
    (the budget limit that ran out, or the guesser's failure). ``trace`` is a
    :class:`~plansieve.loop.trace.TraceWriter`; it is not closed here. Without a
    ``budget`` a run gets five rounds.
    """
    from plansieve.loop.feedback import LEVELS
    if feedback not in LEVELS:
        raise ValueError(f"unknown feedback level {feedback!r}; expected one of "
                         f"{', '.join(LEVELS)}")
    run = _Run(task, guesser, _chain_of(critics, task), feedback,
               budget if budget is not None else at_most_rounds(5), trace, task_id, seed,
               prices, on_round, dict(settings or {}))
    try:
        return await run.go()
    except asyncio.CancelledError:
        if not run.finished:
            run.finish("cancelled", "the run was cancelled by its caller")
        raise


def sieve_sync(task: Task, guesser: Guesser, **options) -> Outcome:
    """``sieve`` for callers without an event loop; same options, same outcome."""
    return asyncio.run(sieve(task, guesser, **options))
