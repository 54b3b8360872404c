"""What ``plansieve check`` prints: a report for people, a versioned document for machines."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict

from plansieve.critics.check import CheckResult
from plansieve.critics.plan import Plan
from plansieve.critics.verdict import Verdict
from plansieve.profile_text import render_profiles

SCHEMA_PATH = Path(__file__).resolve().parents[1] / "docs" / "schema" / "check.schema.json"


class NamedFile(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")
    file: str
    name: str


class PlanFile(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")
    file: str
    steps: int


class CheckDocument(BaseModel):
    """The ``--json`` output of ``plansieve check``; ``format`` changes when fields do."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    format: Literal["plansieve.check/1"] = "plansieve.check/1"
    domain: NamedFile
    problem: NamedFile
    plan: PlanFile
    passed: bool
    verdicts: list[Verdict]


def schema_text() -> str:
    """The JSON Schema of CheckDocument, as kept in docs/schema/ (``make schema`` writes it)."""
    return json.dumps(CheckDocument.model_json_schema(), indent=2, sort_keys=True) + "\n"


def _body(message: str, step_text: str | None) -> str:
    """The message without the step it starts with (the heading already shows the step)."""
    if step_text and message.startswith(step_text):
        return message[len(step_text):].lstrip(": ")
    return message


def _hints(finding, limit: int = 4) -> list[str]:
    hints = getattr(finding, "hints", None) or []
    if not hints:
        return []
    shown = ", ".join(h.call() for h in hints[:limit])
    more = f" (+{len(hints) - limit} more)" if len(hints) > limit else ""
    return [f"        could be repaired by first doing one of: {shown}{more}"]


def render_timeline(v: Verdict) -> list[str]:
    """One line per deadline or time limit: met or missed, and when."""
    out = []
    for e in v.timeline:
        if e.met:
            when = f"reached at {e.reached_at:g}" if e.reached_at is not None else "met"
            out.append(f"met     {e.what}: by {e.deadline:g}, {when}")
        elif e.reached_at is not None:
            out.append(f"MISSED  {e.what}: by {e.deadline:g}, reached at {e.reached_at:g} "
                       f"({e.reached_at - e.deadline:g} late)")
        else:
            out.append(f"MISSED  {e.what}: by {e.deadline:g}, never reached")
    return out


def render_check(result: CheckResult, plan: Plan, *, domain: str, problem: str,
                 plan_name: str) -> str:
    lines = [
        "plansieve check",
        f"  domain   {domain}",
        f"  problem  {problem}",
        f"  plan     {plan_name}  ({len(plan)} step{'s' if len(plan) != 1 else ''})",
        "",
    ]
    for v in result.verdicts:
        state = "pass" if v.passed else "FAIL"
        kind = "sound" if v.sound else "advisory"
        n = len(v.findings)
        lines.append(f"  {v.critic} {v.version} ({kind}): {state}, {n} finding"
                     f"{'s' if n != 1 else ''}, {v.steps_checked} of {len(plan)} steps run, "
                     f"{v.seconds * 1000:.2f} ms")
    for v in result.verdicts:
        if v.profiles:
            lines += ["", "  resources (strip, low to high: _ . - ~ ^   ! = limit crossed)"]
            lines += [f"  {l}" for l in render_profiles(v, width=100)]
        if v.timeline:
            lines += ["", "  deadlines"] + [f"    {l}" for l in render_timeline(v)]
    groups: dict[int | None, list] = {}
    seen: set[tuple] = set()
    for f in result.findings:  # two critics may report one problem in the same words
        key = (f.code, f.step, f.message)
        if key not in seen:
            seen.add(key)
            groups.setdefault(f.step, []).append(f)
    for step in sorted(groups, key=lambda s: (s is None, s or 0)):
        lines.append("")
        if step is None:
            lines.append("  after the last step")
        else:
            ps = plan.steps[step - 1]
            where = f"   (line {ps.line})" if ps.line else ""
            lines.append(f"  step {step}  {ps.call()}{where}")
        for f in groups[step]:
            lines.append(f"    - {f.code}: {_body(f.message, f.step_text)}")
            lines.extend(_hints(f))
    lines.append("")
    if result.passed:
        lines.append("ACCEPTED: every sound critic passed the plan.")
    else:
        total = len(seen)
        lines.append(f"REJECTED: {total} finding{'s' if total != 1 else ''}.")
    return "\n".join(lines) + "\n"
