"""What a run returns: verified or not, why it stopped, and what each round did."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict

from plansieve.adapters.guesser import Usage
from plansieve.critics.plan import Plan
from plansieve.loop.events import Totals

# Why a run stops. A budget limit stops it under the limit's own name.
STOP_CODES = ("verified", "rounds", "seconds", "tokens", "cost", "guesser-failed", "cancelled")


class RoundSummary(BaseModel):
    """One round in a few fields: enough to print a line or draw a curve."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    round: int
    steps: int  # plan steps read from the answer
    unread: int  # step-like lines that could not be read
    accepted: bool
    failed: list[str] = []  # sound critics that failed
    codes: list[str] = []  # finding codes from the sound critics, in chain order
    feedback: str | None = None  # the text sent back; None when accepted
    usage: Usage = Usage()
    seconds: float = 0.0  # the whole round: guess, reading, critics, feedback


class Outcome(BaseModel):
    """The result of one run of the loop."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    run_id: str
    verified: bool
    stop: str
    detail: str = ""
    rounds: int
    plan_text: str | None = None  # the verified plan in plan-file form
    summaries: list[RoundSummary] = []
    totals: Totals = Totals()

    @property
    def plan(self) -> Plan | None:
        """The verified plan, read back from ``plan_text``."""
        if self.plan_text is None:
            return None
        from plansieve.critics.plan_text import read_plan
        return read_plan(self.plan_text, "<verified plan>")
