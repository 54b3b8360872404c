"""Why an HTTP endpoint gave no answer, as types a caller can tell apart.

Every kind is a :class:`GuesserFailed`, so the loop needs nothing new: it stops with
``guesser-failed`` and the reason. A caller that wants to react differently to a
server that is down and one that refuses the request catches the subclass.

Reasons are written by the guesser in our own words and are passed through the
secret scrubber before they are raised; they never carry header values or the URL
as configured, only the masked form.
"""

from __future__ import annotations

from plansieve.adapters.guesser import GuesserFailed


class EndpointUnreachable(GuesserFailed):
    """No connection could be made, or it broke before the whole answer arrived."""


class EndpointTimedOut(GuesserFailed):
    """The endpoint was too slow: to connect, between bytes, or for the whole call."""


class EndpointRefused(GuesserFailed):
    """The endpoint answered with a status that another try would not change (most 4xx)."""

    def __init__(self, reason: str, *, status: int, guesser: str = "", attempt: int = 1) -> None:
        super().__init__(reason, guesser=guesser, attempt=attempt)
        self.status = status


class EndpointBusy(GuesserFailed):
    """The endpoint kept answering with a transient status (429, 503...) until the tries
    or the time to wait ran out."""

    def __init__(self, reason: str, *, status: int, guesser: str = "", attempt: int = 1) -> None:
        super().__init__(reason, guesser=guesser, attempt=attempt)
        self.status = status


class AnswerTooLarge(GuesserFailed):
    """The answer was longer than ``limits.max_answer_bytes``; reading stopped at the limit."""


class AnswerUnreadable(GuesserFailed):
    """An answer arrived but holds no text where the settings say it should: not JSON, a
    content type that is not JSON, the configured path missing, or not a string there."""


class NoTimeToWait(GuesserFailed):
    """A wait of our own (the rate limit) would end after the run's time budget."""


def with_attempt(error: GuesserFailed, reason: str, attempt: int) -> GuesserFailed:
    """A copy of ``error`` (same type and status) with another reason and try number."""
    status = getattr(error, "status", None)
    if status is not None:
        return type(error)(reason, status=status, guesser=error.guesser, attempt=attempt)
    return type(error)(reason, guesser=error.guesser, attempt=attempt)
