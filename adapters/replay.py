"""The replay guesser: answers each round with what a recorded run's guesser said.

An auditor replays a trace against today's critics, or against a corrected model,
and sees whether the same answers would still be accepted. Texts and usage come
from the ``guess-received`` events; a round whose guesser gave up (a final
``guess-failed``) fails again with the recorded reason, and the failed tries that
were retried are reported again (without waiting) so the totals come out the same.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from typing import Any

from pydantic import ValidationError

from plansieve.adapters.guesser import Guess, GuesserFailed, GuessRequest, RetryNote
from plansieve.loop.events import EVENT_ADAPTER, GuessFailed, GuessReceived, RunStarted, TaskRef
from plansieve.loop.trace import TraceError
from plansieve.loop.trace_read import read_trace


class ReplayGuesser:
    """A guesser that repeats one recorded run, round by round."""

    name = "replay"

    def __init__(self, answers: dict[int, Guess], *,
                 failures: dict[int, tuple[str, int] | str] | None = None,
                 source: str = "<events>", run: str | None = None,
                 task: TaskRef | None = None,
                 retries: dict[int, list[RetryNote]] | None = None) -> None:
        self.answers = dict(answers)
        # round -> (reason, attempt); a bare reason means the first try failed
        self.failures = {r: (f, 1) if isinstance(f, str) else f
                         for r, f in (failures or {}).items()}
        self.retries = {r: tuple(notes) for r, notes in (retries or {}).items()}
        self.source = source
        self.run = run
        self.task = task  # the recorded task, for callers that want to compare

    @classmethod
    def from_trace(cls, path: str | os.PathLike[str], *, run: str | None = None) -> "ReplayGuesser":
        """Replay the run in a trace file (``run`` picks one when the file holds several)."""
        return cls.from_events(read_trace(path), run=run, source=os.fspath(path))

    @classmethod
    def from_events(cls, events: Iterable[Any], *, run: str | None = None,
                    source: str = "<events>") -> "ReplayGuesser":
        """Replay from events: models, or dicts as a MemorySink keeps them."""
        models = []
        for index, event in enumerate(events):
            if isinstance(event, dict):
                try:
                    event = EVENT_ADAPTER.validate_python(event)
                except ValidationError as err:
                    raise TraceError(f"{source}: event #{index} is not a valid trace event "
                                     f"({err.error_count()} problem(s)); check it with "
                                     "verify_trace") from None
            models.append(event)
        runs = list(dict.fromkeys(e.run for e in models))
        if not runs:
            raise TraceError(f"{source}: the trace holds no events to replay")
        if run is None:
            if len(runs) > 1:
                raise TraceError(f"{source}: the trace holds {len(runs)} runs "
                                 f"({', '.join(runs)}); say which one to replay")
            run = runs[0]
        elif run not in runs:
            raise TraceError(f"{source}: no run '{run}' in the trace; it holds "
                             f"{', '.join(runs)}")
        answers: dict[int, Guess] = {}
        failures: dict[int, tuple[str, int]] = {}
        retries: dict[int, list[RetryNote]] = {}
        task = None
        for event in models:
            if event.run != run:
                continue
            if isinstance(event, RunStarted):
                task = event.task
            elif isinstance(event, GuessReceived):
                if event.round in answers:
                    raise TraceError(f"{source}: run '{run}' records two answers for round "
                                     f"{event.round}; it cannot be replayed")
                answers[event.round] = Guess(text=event.text, usage=event.usage,
                                             prompt=event.prompt, attempt=event.attempt)
            elif isinstance(event, GuessFailed) and event.retry:
                retries.setdefault(event.round, []).append(RetryNote(
                    attempt=event.attempt, reason=event.reason,
                    wait_seconds=event.wait_seconds or 0.0, usage=event.usage))
            elif isinstance(event, GuessFailed):
                failures[event.round] = (event.reason, event.attempt)
        return cls(answers, failures=failures, source=source, run=run, task=task,
                   retries=retries)

    def describe(self) -> dict[str, Any]:
        return {"source": self.source, "run": self.run, "rounds": len(self.answers)}

    async def guess(self, request: GuessRequest) -> Guess:
        # The failed tries are reported again, without their waits.
        for note in self.retries.get(request.round, ()):
            request.retrying(note)
        answer = self.answers.get(request.round)
        if answer is not None:
            return answer
        if request.round in self.failures:
            reason, attempt = self.failures[request.round]
            raise GuesserFailed(reason, guesser=self.name, attempt=attempt)
        held = ", ".join(str(r) for r in sorted(self.answers)) or "none"
        raise GuesserFailed(f"the trace {self.source} holds no answer for round {request.round} "
                            f"(rounds answered: {held})", guesser=self.name)
