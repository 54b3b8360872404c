"""The guesser protocol: what the loop asks of anything that proposes plans.

A guesser gets the task, the round number and the history of earlier answers with
the feedback each drew, and returns raw text plus what the call cost. The loop
reads the plan out of the text itself, so a guesser never has to produce a clean
plan: a local search, a scripted list and a model server behind HTTP all fit.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol, runtime_checkable

from pydantic import BaseModel, ConfigDict

from plansieve.critics.errors import PlansieveError
from plansieve.critics.model import Task


class Usage(BaseModel):
    """What one guesser call cost: tokens in and out, money, and wall seconds."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    input_tokens: int = 0
    output_tokens: int = 0
    cost: float = 0.0
    seconds: float = 0.0

    @property
    def tokens(self) -> int:
        return self.input_tokens + self.output_tokens

    def __add__(self, other: "Usage") -> "Usage":
        return Usage(input_tokens=self.input_tokens + other.input_tokens,
                     output_tokens=self.output_tokens + other.output_tokens,
                     cost=self.cost + other.cost, seconds=self.seconds + other.seconds)


class Guess(BaseModel):
    """A guesser's answer: the raw text, its cost and, if one was built, the prompt sent."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    text: str
    usage: Usage = Usage()
    prompt: str | None = None
    # which try of the round gave the answer (>1 after retries)
    attempt: int = 1


@dataclass(frozen=True)
class Attempt:
    """One earlier round as the guesser is allowed to see it.

    ``feedback`` is the text the feedback policy rendered; ``findings`` are the
    structured findings it chose to show (none at the terse levels), so a local
    guesser can act on them without parsing text.
    """

    round: int
    text: str
    feedback: str
    findings: tuple = ()


@dataclass(frozen=True)
class RetryNote:
    """A failed try within one round that the guesser is about to try again.

    The loop writes it to the trace and charges ``usage`` (what the failed try
    cost, if anything) to the budget; a retry is not a new round.
    """

    attempt: int
    reason: str
    wait_seconds: float
    usage: Usage = Usage()


@dataclass(frozen=True)
class GuessRequest:
    """Everything a guesser may use for one round; it must not need anything else."""

    task: Task
    round: int  # 1-based
    history: tuple[Attempt, ...] = ()
    task_id: str = "task"
    # Extra settings the caller passes through (sampling temperature and the like).
    settings: dict[str, Any] = field(default_factory=dict)
    # time.monotonic() value at which the run's time budget ends (None: no time limit);
    # a guesser that waits (retries, back-off) must not wait past it.
    deadline: float | None = None
    # Where a guesser that retries reports each failed try (the loop sets it).
    on_retry: Callable[[RetryNote], None] | None = field(default=None, compare=False)

    def retrying(self, note: RetryNote) -> None:
        """Report a failed try that will be tried again."""
        if self.on_retry is not None:
            self.on_retry(note)

    def seconds_left(self, now: float) -> float:
        """Seconds until the run's time budget ends (infinite without one)."""
        return float("inf") if self.deadline is None else self.deadline - now

    @property
    def feedback(self) -> str:
        """The feedback on the latest attempt, or '' in the first round."""
        return self.history[-1].feedback if self.history else ""


@runtime_checkable
class Guesser(Protocol):
    """Proposes plans. ``describe`` returns the settings recorded in the trace."""

    name: str

    def describe(self) -> dict[str, Any]: ...

    async def guess(self, request: GuessRequest) -> Guess: ...


class GuesserFailed(PlansieveError):
    """The guesser could not give an answer (after any retries of its own)."""

    def __init__(self, reason: str, *, guesser: str = "", attempt: int = 1) -> None:
        super().__init__(reason)
        self.reason = reason
        self.guesser = guesser
        # the try of the round that failed last (every earlier one was reported as a retry)
        self.attempt = attempt
