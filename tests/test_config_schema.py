"""The published JSON Schemas, checked by an independent validator.

`jsonschema` (a general-purpose JSON Schema library from the registry, used here only as
an oracle) reads docs/schema/config.schema.json and docs/schema/trace.schema.json as
JSON Schema draft 2020-12 says (https://json-schema.org/draft/2020-12). The example
configuration must pass, files our reader refuses for their shape must fail, and every
line of a real trace must pass the trace schema.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import jsonschema
import pytest

from plansieve.adapters.config_file import SCHEMA_PATH, parse_config, schema_text
from plansieve.adapters.guesser import Guess, RetryNote, Usage
from plansieve.critics.errors import InputError
from plansieve.critics.pddl import load_task
from plansieve.loop.budget import at_most_rounds
from plansieve.loop.engine import sieve_sync
from plansieve.loop.events import SCHEMA_PATH as TRACE_SCHEMA_PATH
from plansieve.loop.trace import FileSink, TraceWriter

if sys.version_info >= (3, 11):
    import tomllib
else:
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "local-model" / "plansieve.toml"
HARBOUR = ROOT / "examples" / "harbour"


def validator(path: Path) -> jsonschema.Draft202012Validator:
    schema = json.loads(path.read_text())
    jsonschema.Draft202012Validator.check_schema(schema)  # the schema itself is well formed
    return jsonschema.Draft202012Validator(schema)


def test_published_config_schema_is_current():
    assert SCHEMA_PATH.read_text() == schema_text(), (
        "docs/schema/config.schema.json is stale; regenerate it with `make schema`")


def test_the_example_configuration_passes_the_schema():
    data = tomllib.loads(EXAMPLE.read_text())
    assert list(validator(SCHEMA_PATH).iter_errors(data)) == []


@pytest.mark.parametrize("text", [
    '[guesser]\nkind = "remote"\n',                                   # not an allowed word
    '[guesser.http]\nurl = "http://h/x"\nretries = { attempts = 0 }\n',  # below the minimum
    '[guesser.http]\nurl = "http://h/x"\nmethod = "GET"\n',           # not an allowed method
    '[budget]\nrounds = "five"\n',                                    # not a number
    '[feedback]\nlevel = "loud"\n',                                   # not a level
    '[trace]\nfsync = "yes"\n',                                       # not a boolean
    '[critic]\nnames = []\n',                                         # unknown table
    '[guesser.http]\nurl = "http://h/x"\nlimits = { max_answer_bytes = 0 }\n',
])
def test_shapes_our_reader_refuses_the_schema_refuses_too(text):
    data = tomllib.loads(text)
    with pytest.raises(InputError):
        parse_config(text, "plansieve.toml")
    assert list(validator(SCHEMA_PATH).iter_errors(data)), text


class _Flaky:
    """One failed try with usage, then the harbour demo's good plan."""

    name = "flaky"

    def describe(self):
        return {"script": "one retry"}

    async def guess(self, request):
        request.retrying(RetryNote(attempt=1, reason="busy", wait_seconds=0.5,
                                   usage=Usage(input_tokens=3)))
        return Guess(text=(HARBOUR / "plan-good.plan").read_text(), attempt=2,
                     usage=Usage(input_tokens=10, output_tokens=20))


def test_every_line_of_a_trace_passes_the_trace_schema(tmp_path):
    task = load_task(HARBOUR / "domain.pddl", HARBOUR / "problem.pddl")
    path = tmp_path / "run.jsonl"
    with TraceWriter(FileSink(path), run_id="schema-run") as trace:
        outcome = sieve_sync(task, _Flaky(), budget=at_most_rounds(2), trace=trace)
    assert outcome.verified
    check = validator(TRACE_SCHEMA_PATH)
    lines = [json.loads(line) for line in path.read_text().splitlines()]
    assert {e["kind"] for e in lines} >= {"run-started", "guess-failed", "guess-received",
                                          "verdict", "run-finished"}
    for event in lines:
        assert list(check.iter_errors(event)) == [], event["kind"]
