"""The trace's event schema: the published JSON Schema is current and says what the models say."""

from __future__ import annotations

import json
from typing import get_args

import pytest
from pydantic import ValidationError

from plansieve.adapters.guesser import Usage
from plansieve.critics.verdict import Finding, GoalUnmet, Verdict
from plansieve.loop.events import (
    ENVELOPE, EVENT_ADAPTER, EVENT_KINDS, SCHEMA_PATH, SCHEMA_VERSION, BudgetLimit, CriticRef,
    FeedbackGiven, GuessAsked, GuesserRef, GuessFailed, GuessReceived, PlanRead, RunFinished,
    RunStarted, TaskRef, Totals, UnreadLine, VerdictGiven, schema_text, sha256_text,
)

REGENERATE = (".venv/bin/python -c \"from plansieve.loop.events import SCHEMA_PATH, schema_text; "
              "SCHEMA_PATH.write_text(schema_text())\"  (or `make schema`)")


def test_published_trace_schema_is_current():
    assert SCHEMA_PATH.read_text() == schema_text(), (
        f"docs/schema/{SCHEMA_PATH.name} is stale; regenerate it with: {REGENERATE}")


def _branches() -> dict[str, dict]:
    schema = json.loads(schema_text())
    defs = schema["$defs"]
    out = {}
    for ref in schema["oneOf"]:
        d = defs[ref["$ref"].rsplit("/", 1)[1]]
        out[d["properties"]["kind"]["const"]] = d
    return out


def test_one_branch_per_kind_with_the_envelope_required():
    branches = _branches()
    assert set(branches) == set(EVENT_KINDS) == {
        "run-started", "guess-asked", "guess-received", "guess-failed", "plan-read",
        "verdict", "feedback", "run-finished"}
    schema = json.loads(schema_text())
    assert schema["discriminator"]["propertyName"] == "kind"
    for kind, d in branches.items():
        # the file holds the serialized form, where every field is always present
        assert set(ENVELOPE) | {"kind"} <= set(d["required"]), kind
        assert set(d["required"]) == set(d["properties"]), kind
        assert d["additionalProperties"] is False
        for name in ENVELOPE:
            assert "default" not in d["properties"][name], (kind, name)


def test_findings_in_the_schema_are_the_critics_finding_kinds():
    defs = json.loads(schema_text())["$defs"]
    codes = {d["properties"]["code"]["const"] for d in defs.values()
             if "code" in d.get("properties", {})}
    assert codes == {cls.model_fields["code"].default for cls in get_args(get_args(Finding)[0])}


def _task() -> TaskRef:
    return TaskRef.from_texts(domain="ferry-lines", problem="morning-crossings", task_id="fl-1",
                              domain_text="(define (domain ferry-lines))",
                              problem_text="(define (problem morning-crossings))")


SAMPLES = [
    RunStarted(task=_task(), critics=[CriticRef(name="plan-simulator", version="1", sound=True,
                                                role="sound")],
               guesser=GuesserRef(name="local", settings={"width": 3}),
               budget=[BudgetLimit(limit="rounds", value=4)], feedback_level="hints",
               chain_mode="all", seed=7),
    GuessAsked(round=1, feedback="", history=0),
    GuessReceived(round=1, text="(sail ferry2 quillon marrow)", usage=Usage(input_tokens=12)),
    GuessFailed(round=2, attempt=1, reason="connection refused", retry=True, wait_seconds=0.5),
    PlanRead(round=1, steps=["(sail ferry2 quillon marrow)"],
             unread=[UnreadLine(line=2, text="then rest", reason="not a step")]),
    VerdictGiven(round=1, role="sound", verdict=Verdict(
        critic="plan-simulator", version="1", sound=True, passed=False,
        findings=[GoalUnmet(message="goal (docked ferry2 marrow) is false",
                            condition="(docked ferry2 marrow)")])),
    FeedbackGiven(round=1, level="hints", text="dock the ferry",
                  findings=[GoalUnmet(message="m", condition="(docked ferry2 marrow)")]),
    RunFinished(verified=True, stop="verified", rounds=1, totals=Totals(guesser_calls=1),
                plan="(sail ferry2 quillon marrow)"),
]


@pytest.mark.parametrize("event", SAMPLES, ids=lambda e: e.kind)
def test_every_kind_round_trips_through_json(event):
    event = event.model_copy(update={"seq": 5, "at": "2031-04-02T09:15:00.250000Z",
                                     "run": "run-a", "prev": "ab" * 32})
    text = event.model_dump_json()
    back = EVENT_ADAPTER.validate_json(text)
    assert type(back) is type(event) and back == event


def test_run_started_records_the_schema_version():
    assert SCHEMA_VERSION == 1
    assert SAMPLES[0].schema_version == 1
    # Source: FIPS 180-4 SHA-256; the digest of "abc" is its published example.
    assert sha256_text("abc") == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad")


def test_only_a_sound_critic_holds_the_sound_role():
    with pytest.raises(ValidationError, match="cannot hold the sound role"):
        CriticRef(name="style", version="1", sound=False, role="sound")
    CriticRef(name="style", version="1", sound=False, role="advisory")
    unsound = Verdict(critic="style", version="1", sound=False, passed=True)
    with pytest.raises(ValidationError, match="cannot hold the sound role"):
        VerdictGiven(round=1, verdict=unsound, role="sound")


def test_a_finished_run_is_consistent_about_verification():
    totals = Totals()
    with pytest.raises(ValidationError, match="exactly when"):
        RunFinished(verified=True, stop="rounds", rounds=3, totals=totals, plan="(a)")
    with pytest.raises(ValidationError, match="exactly when"):
        RunFinished(verified=False, stop="verified", rounds=3, totals=totals)
    with pytest.raises(ValidationError, match="must record its plan"):
        RunFinished(verified=True, stop="verified", rounds=3, totals=totals)


def test_stored_events_need_the_envelope_filled():
    data = SAMPLES[1].model_dump(mode="json")  # placeholders: no time, no run id
    with pytest.raises(ValidationError) as err:
        EVENT_ADAPTER.validate_python(data)
    assert {e["loc"][-1] for e in err.value.errors()} == {"at", "run"}
