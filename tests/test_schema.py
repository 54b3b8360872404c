"""The JSON Schema in docs/ matches the models, and `check --json` output fits it."""

from __future__ import annotations

import json
from pathlib import Path

from plansieve.cli import main
from plansieve.report import SCHEMA_PATH, CheckDocument, schema_text

HARBOUR = Path(__file__).resolve().parents[1] / "examples" / "harbour"


def test_published_schema_is_current():
    assert SCHEMA_PATH.read_text() == schema_text(), "docs/schema is stale: run `make schema`"


def test_check_json_output_validates_against_the_document_model(capsys):
    main(["check", "--json", "--keep-going", "--domain", str(HARBOUR / "domain.pddl"),
          "--problem", str(HARBOUR / "problem.pddl"), str(HARBOUR / "plan-broken.plan")])
    doc = CheckDocument.model_validate_json(capsys.readouterr().out)
    assert doc.format == "plansieve.check/1"
    # every finding kind is one branch of the discriminated union, keyed by "code"
    schema = json.loads(SCHEMA_PATH.read_text())
    codes = {d["properties"]["code"]["const"] for name, d in schema["$defs"].items()
             if "code" in d.get("properties", {})}
    assert {f.code for f in doc.verdicts[0].findings} <= codes
    assert {"action-unknown", "precondition-false", "goal-unmet", "effect-conflict"} <= codes
