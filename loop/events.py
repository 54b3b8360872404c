"""What a trace holds: one pydantic model per event kind, told apart by ``kind``.

Every event carries the same envelope — position (``seq``), time (``at``), run id,
the SHA-256 of the event before it (``prev``) and, when the run had a key, an
HMAC — so a reader can check order and integrity without knowing the kinds. The
writer (loop/trace.py) fills the envelope; callers build events without it.

``SCHEMA_VERSION`` changes whenever a stored field changes meaning or goes away;
``docs/schema/trace.schema.json`` is generated from these models.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, TypeAdapter, model_validator

from plansieve import __version__
from plansieve.adapters.guesser import Usage
from plansieve.critics.verdict import Finding, Verdict

SCHEMA_VERSION = 1
# ``prev`` of the first event of a run: there is nothing before it.
GENESIS = "0" * 64
ENVELOPE = ("seq", "at", "run", "prev", "mac")

SCHEMA_PATH = Path(__file__).resolve().parents[1] / "docs" / "schema" / "trace.schema.json"

_HEX64 = r"^[0-9a-f]{64}$"
# UTC only, 'Z' suffix, optional fraction: what the writer produces.
_UTC_TIME = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}(\.[0-9]{1,9})?Z$"


def _drop_envelope_defaults(schema: dict[str, Any], cls: type) -> None:
    # The writer always fills the envelope: to a reader of the file the fields are required
    # and their construction-time placeholders mean nothing.
    for name in ENVELOPE:
        schema.get("properties", {}).get(name, {}).pop("default", None)


class _Model(BaseModel):
    # Stored form = serialized form, so a field with a default is still always present.
    model_config = ConfigDict(frozen=True, extra="forbid",
                              json_schema_serialization_defaults_required=True)


def sha256_text(text: str | bytes) -> str:
    """Hex SHA-256 of a text (UTF-8) — how the trace fingerprints the domain and problem."""
    data = text.encode("utf-8") if isinstance(text, str) else text
    return hashlib.sha256(data).hexdigest()


# --- parts of run-started ---------------------------------------------------------------------


class TaskRef(_Model):
    """Which task the run was about: names plus fingerprints of the exact texts used."""

    domain: str = Field(description="Domain name as declared in the PDDL.")
    problem: str = Field(description="Problem name as declared in the PDDL.")
    task_id: str
    domain_sha256: str = Field(pattern=_HEX64, description="SHA-256 of the domain text (UTF-8).")
    problem_sha256: str = Field(pattern=_HEX64, description="SHA-256 of the problem text (UTF-8).")
    limits_sha256: str | None = Field(
        None, pattern=_HEX64, description="SHA-256 of the extra limits section, when there is one.")

    @classmethod
    def from_texts(cls, *, domain: str, problem: str, task_id: str, domain_text: str,
                   problem_text: str, limits_text: str | None = None) -> "TaskRef":
        return cls(domain=domain, problem=problem, task_id=task_id,
                   domain_sha256=sha256_text(domain_text),
                   problem_sha256=sha256_text(problem_text),
                   limits_sha256=None if limits_text is None else sha256_text(limits_text))


class CriticRef(_Model):
    """A critic in the chain; only a sound critic may hold the sound role."""

    name: str
    version: str
    sound: bool
    role: Literal["sound", "advisory"]

    @model_validator(mode="after")
    def _role_needs_soundness(self) -> "CriticRef":
        if self.role == "sound" and not self.sound:
            raise ValueError("a critic that is not sound cannot hold the sound role")
        return self


class GuesserRef(_Model):
    name: str
    settings: dict[str, Any] = {}


class BudgetLimit(_Model):
    """One limit of the budget: ``rounds``, ``seconds``, ``tokens``, ``cost``..."""

    limit: str
    value: float = Field(ge=0)


class UnreadLine(_Model):
    """A line of the guesser's answer that could not be read as a plan step."""

    line: int = Field(ge=1)
    text: str
    reason: str


class Totals(_Model):
    """What a run used, all rounds together."""

    rounds: int = Field(0, ge=0, description="Rounds asked of the guesser; retries are not rounds.")
    guesser_calls: int = Field(0, ge=0, description="Calls made, retried tries included.")
    input_tokens: int = Field(0, ge=0)
    output_tokens: int = Field(0, ge=0)
    cost: float = 0.0
    seconds: float = 0.0

    @property
    def tokens(self) -> int:
        return self.input_tokens + self.output_tokens


# --- the events -------------------------------------------------------------------------------


class BaseEvent(_Model):
    """The envelope every event kind shares."""

    model_config = ConfigDict(json_schema_extra=_drop_envelope_defaults)

    seq: int = Field(0, ge=0, description="Position of the event in its run, from 0.")
    at: str = Field("", pattern=_UTC_TIME, description="When it was written, UTC, ISO 8601.")
    run: str = Field("", min_length=1, description="Id of the run the event belongs to.")
    prev: str = Field(GENESIS, pattern=_HEX64, description=(
        "Hex SHA-256 of the canonical JSON (RFC 8785) of the previous event, mac included; "
        "64 zeros for the first event of a run."))
    mac: str | None = Field(None, pattern=_HEX64, description=(
        "Hex HMAC-SHA256 over the canonical JSON of this event without 'mac'; "
        "null when the run had no key."))

    def body(self) -> dict[str, Any]:
        """The event without its envelope, as JSON-ready data."""
        return self.model_dump(mode="json", exclude=set(ENVELOPE))


class RunStarted(BaseEvent):
    kind: Literal["run-started"] = "run-started"
    schema_version: int = Field(SCHEMA_VERSION, ge=1)
    plansieve_version: str = __version__
    task: TaskRef
    critics: list[CriticRef]
    guesser: GuesserRef
    budget: list[BudgetLimit]
    feedback_level: str
    chain_mode: str
    seed: int | None = None


class GuessAsked(BaseEvent):
    kind: Literal["guess-asked"] = "guess-asked"
    round: int = Field(ge=1)
    feedback: str = Field(description="The feedback text sent with the request ('' in round 1).")
    history: int = Field(ge=0, description="How many earlier rounds the guesser was shown.")
    settings: dict[str, Any] = {}


class GuessReceived(BaseEvent):
    kind: Literal["guess-received"] = "guess-received"
    round: int = Field(ge=1)
    text: str
    usage: Usage = Usage()
    prompt: str | None = None
    attempt: int = Field(1, ge=1, description="Which try of the round gave the answer.")


class GuessFailed(BaseEvent):
    """One failed attempt at a guess; ``retry`` says whether another attempt follows."""

    kind: Literal["guess-failed"] = "guess-failed"
    round: int = Field(ge=1)
    attempt: int = Field(ge=1)
    reason: str
    retry: bool
    wait_seconds: float | None = Field(None, ge=0)
    usage: Usage = Usage()


class PlanRead(BaseEvent):
    kind: Literal["plan-read"] = "plan-read"
    round: int = Field(ge=1)
    steps: list[str]
    unread: list[UnreadLine] = []


class VerdictGiven(BaseEvent):
    kind: Literal["verdict"] = "verdict"
    round: int = Field(ge=1)
    verdict: Verdict
    role: Literal["sound", "advisory"]

    @model_validator(mode="after")
    def _role_needs_soundness(self) -> "VerdictGiven":
        if self.role == "sound" and not self.verdict.sound:
            raise ValueError("a verdict from a critic that is not sound cannot hold the sound role")
        return self


class FeedbackGiven(BaseEvent):
    kind: Literal["feedback"] = "feedback"
    round: int = Field(ge=1)
    level: str
    text: str
    findings: list[Finding] = Field([], description="The findings the feedback showed.")


class RunFinished(BaseEvent):
    kind: Literal["run-finished"] = "run-finished"
    verified: bool
    stop: str = Field(description=(
        "Why the run stopped: 'verified', or the limit or failure that ended it."))
    detail: str = ""
    rounds: int = Field(ge=0)
    totals: Totals
    plan: str | None = Field(None, description="The verified plan, or null.")

    @model_validator(mode="after")
    def _verified_has_plan(self) -> "RunFinished":
        if self.verified != (self.stop == "verified"):
            raise ValueError("'verified' is true exactly when 'stop' is 'verified'")
        if self.verified and self.plan is None:
            raise ValueError("a verified run must record its plan")
        return self


TraceEvent = Annotated[
    Union[RunStarted, GuessAsked, GuessReceived, GuessFailed, PlanRead, VerdictGiven,
          FeedbackGiven, RunFinished],
    Field(discriminator="kind"),
]
EVENT_ADAPTER: TypeAdapter[Any] = TypeAdapter(TraceEvent)
EVENT_KINDS: dict[str, type[BaseEvent]] = {
    cls.model_fields["kind"].default: cls
    for cls in (RunStarted, GuessAsked, GuessReceived, GuessFailed, PlanRead, VerdictGiven,
                FeedbackGiven, RunFinished)
}


def schema_text() -> str:
    """The JSON Schema of one trace line, as kept in docs/schema/trace.schema.json."""
    schema = EVENT_ADAPTER.json_schema(mode="serialization")
    schema = {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "title": f"plansieve trace event, schema version {SCHEMA_VERSION}",
        "description": ("A trace is a JSON Lines file: one event per line, each in RFC 8785 "
                        "canonical form, chained by 'prev'."),
        **schema,
    }
    return json.dumps(schema, indent=2, sort_keys=True) + "\n"
