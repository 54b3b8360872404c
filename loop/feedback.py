"""Feedback: what the next guess is told about the last one, at a chosen level of detail.

Four levels, from least to most said:

``pass-fail``       only that the plan was not accepted;
``first-problem``   the first problem the chain found;
``all-problems``    every problem, each once;
``all-with-fixes``  every problem, and for a false condition the actions that could
                    make it true.

The same note is kept twice: as short deterministic text for the next prompt, and
as the structured findings it shows, so a local guesser (or a sweep) can use them
without reading text back.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict

from plansieve.critics.verdict import Finding, Verdict

FeedbackLevel = Literal["pass-fail", "first-problem", "all-problems", "all-with-fixes"]
LEVELS: tuple[str, ...] = ("pass-fail", "first-problem", "all-problems", "all-with-fixes")

MAX_LISTED = 10  # problems listed in one note; more are counted, not shown
MAX_FIXES = 3  # actions suggested per problem


class UnreadNote(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")

    line: int
    text: str
    reason: str


class FeedbackNote(BaseModel):
    """One round's feedback, as text and as the findings it shows."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    level: FeedbackLevel
    text: str
    findings: list[Finding] = []
    advisory: list[Finding] = []
    unread: list[UnreadNote] = []


def _line(f) -> str:
    where = f"step {f.step}: " if f.step is not None else ""
    if f.time is not None and f.step is None:
        where = f"at time {f.time:g}: "
    return f"- {where}{f.message}"


def _fixes(f) -> str | None:
    hints = getattr(f, "hints", None)
    if not hints:
        return None
    calls = [h.call() for h in hints[:MAX_FIXES]]
    more = f" (and {len(hints) - MAX_FIXES} more)" if len(hints) > MAX_FIXES else ""
    return "  could be fixed by first doing one of: " + ", ".join(calls) + more


def _unique(findings: list) -> list:
    """Each problem once: two critics may report the same unmet goal in the same words."""
    seen: set[tuple] = set()
    out = []
    for f in findings:
        key = (f.code, f.step, f.message)
        if key not in seen:
            seen.add(key)
            out.append(f)
    return out


def compose_feedback(level: FeedbackLevel, verdicts: list[tuple[str, Verdict]], *,
                     unread: list[UnreadNote] = (), no_steps: bool = False) -> FeedbackNote:
    """Feedback on a rejected answer from the chain's verdicts as ``(role, verdict)`` pairs."""
    if level not in LEVELS:
        raise ValueError(f"unknown feedback level {level!r}; expected one of {', '.join(LEVELS)}")
    blocking = _unique([f for role, v in verdicts if role == "sound" for f in v.findings])
    advisory = _unique([f for role, v in verdicts if role == "advisory" for f in v.findings])
    unread = list(unread)
    lines = ["Your plan was not accepted."]
    if level == "pass-fail":
        lines.append("Send a corrected plan.")
        return FeedbackNote(level=level, text="\n".join(lines))

    if no_steps:
        lines.append("No plan steps were found in your answer. Write one step per line, "
                     "like (action arg1 arg2).")
    shown_unread = unread if level != "first-problem" or not blocking else []
    if level == "first-problem":
        if blocking:
            shown = blocking[:1]
        else:
            shown_unread = unread[:1]
            shown = []
    else:
        shown = blocking
    if shown_unread:
        lines.append("These lines could not be read as plan steps:")
        lines += [f"- line {u.line}: {u.text.strip()} ({u.reason})" for u in shown_unread]
    if shown:
        lines.append("The first problem found:" if level == "first-problem"
                     else f"Problems found ({len(shown)}):")
        for f in shown[:MAX_LISTED]:
            lines.append(_line(f))
            if level == "all-with-fixes" and (fix := _fixes(f)):
                lines.append(fix)
        if len(shown) > MAX_LISTED:
            lines.append(f"- (and {len(shown) - MAX_LISTED} more)")
    shown_advisory = advisory if level in ("all-problems", "all-with-fixes") else []
    if shown_advisory:
        lines.append("Advisory notes (these alone would not block the plan):")
        lines += [_line(f) for f in shown_advisory[:MAX_LISTED]]
    lines.append("Send a corrected plan.")
    return FeedbackNote(level=level, text="\n".join(lines), findings=shown[:MAX_LISTED],
                        advisory=shown_advisory[:MAX_LISTED], unread=shown_unread)
