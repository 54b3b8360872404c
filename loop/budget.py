"""Budgets: small limits that compose with ``|`` and name the one that ran out.

``at_most_rounds(5) | at_most_seconds(30) | at_most_cost(0.50)`` stops at whichever
comes first. The loop asks a budget two things before every guesser call: is
anything used up (and which limit), and how many seconds are left (the call is cut
off there, so time is never overspent). Tokens and money are known only when an
answer arrives, so they can be overspent by at most the one call in flight.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from pydantic import BaseModel, ConfigDict, Field

from plansieve.loop.events import Totals


class Prices(BaseModel):
    """Money per thousand tokens, for guessers that report tokens but no cost."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    input_per_1k: float = Field(default=0.0, ge=0)
    output_per_1k: float = Field(default=0.0, ge=0)

    def cost(self, input_tokens: int, output_tokens: int) -> float:
        return (input_tokens * self.input_per_1k + output_tokens * self.output_per_1k) / 1000


class Budget:
    """A limit on a run. Subclasses say when they are used up."""

    def used_up(self, spent: Totals) -> "Budget | None":
        """The limit that is used up, or None while there is room for another call."""
        raise NotImplementedError

    def seconds_left(self, spent: Totals) -> float:
        return math.inf

    def limits(self) -> list["Budget"]:
        return [self]

    def describe(self) -> list[dict]:
        """``[{"limit": "rounds", "value": 5}, ...]`` for the trace and reports."""
        return [{"limit": b.kind, "value": b.value} for b in self.limits()]  # type: ignore[attr-defined]

    def __or__(self, other: "Budget") -> "Budget":
        if not isinstance(other, Budget):
            return NotImplemented
        return AnyOf(tuple(self.limits()) + tuple(other.limits()))


@dataclass(frozen=True)
class _Limit(Budget):
    value: float
    kind = ""

    def __post_init__(self) -> None:
        if isinstance(self.value, bool) or not isinstance(self.value, (int, float)) \
                or not self.value > 0 or math.isnan(self.value):
            raise ValueError(f"a {self.kind} limit must be a positive number, not {self.value!r}")

    def __str__(self) -> str:
        return f"{self.kind} {self.value:g}"


class at_most_rounds(_Limit):
    """Stop after this many rounds; a guesser's retries within a round do not count."""

    kind = "rounds"

    def __post_init__(self) -> None:
        super().__post_init__()
        if int(self.value) != self.value:
            raise ValueError(f"a rounds limit must be a whole number, not {self.value!r}")

    def used_up(self, spent: Totals) -> Budget | None:
        return self if spent.rounds >= self.value else None


class at_most_seconds(_Limit):
    """Stop when this much wall time has passed; a call in flight is cut off then."""

    kind = "seconds"

    def used_up(self, spent: Totals) -> Budget | None:
        return self if spent.seconds >= self.value else None

    def seconds_left(self, spent: Totals) -> float:
        return max(0.0, self.value - spent.seconds)


class at_most_tokens(_Limit):
    """Stop once the guesser has used this many tokens, in and out together."""

    kind = "tokens"

    def used_up(self, spent: Totals) -> Budget | None:
        return self if spent.tokens >= self.value else None


class at_most_cost(_Limit):
    """Stop once the guesser calls have cost this much money."""

    kind = "cost"

    def used_up(self, spent: Totals) -> Budget | None:
        return self if spent.cost >= self.value else None


@dataclass(frozen=True)
class AnyOf(Budget):
    """Used up as soon as any part is; the first part listed wins a tie."""

    parts: tuple[Budget, ...]

    def used_up(self, spent: Totals) -> Budget | None:
        for p in self.parts:
            hit = p.used_up(spent)
            if hit is not None:
                return hit
        return None

    def seconds_left(self, spent: Totals) -> float:
        return min((p.seconds_left(spent) for p in self.parts), default=math.inf)

    def limits(self) -> list[Budget]:
        return [x for p in self.parts for x in p.limits()]

    def __str__(self) -> str:
        return " | ".join(str(p) for p in self.parts)


def budget_of(rounds: int | None = None, seconds: float | None = None,
              tokens: int | None = None, cost: float | None = None) -> Budget:
    """A budget from plain numbers (None leaves a limit out); at least one is needed."""
    parts: list[Budget] = []
    if rounds is not None:
        parts.append(at_most_rounds(rounds))
    if seconds is not None:
        parts.append(at_most_seconds(seconds))
    if tokens is not None:
        parts.append(at_most_tokens(tokens))
    if cost is not None:
        parts.append(at_most_cost(cost))
    if not parts:
        raise ValueError("a budget needs at least one limit: rounds, seconds, tokens or cost")
    return parts[0] if len(parts) == 1 else AnyOf(tuple(parts))
