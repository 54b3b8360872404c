"""Prompts for model endpoints: what a model is told in each round.

Three templates, each a text file with ``{{name}}`` placeholders: ``system`` opens
the conversation, ``task`` asks for the first plan and ``retry`` carries the
feedback on an answer that failed. plansieve ships its own (``prompts/*.txt``
beside this module); a user may replace any of them.

Placeholders (:data:`PROMPT_NAMES`): ``domain`` and ``problem`` (the PDDL text as
read), ``limits`` (a plain summary of the limits file, empty when there is none),
``plan_format`` (how to write the plan), ``actions`` (one line per action schema),
``round``, ``task_id``, ``feedback`` and ``latest_answer``.

A paragraph (text between blank lines) whose placeholders all come out empty is
left out, so an optional part leaves no stray heading behind: the limits in a
task without limits, the feedback and the previous answer in round 1.

Two ways to hold a conversation over several rounds:

- ``history``: system, task, then per earlier round the model's answer as an
  assistant turn and the retry text as a user turn. Earlier turns stay the same
  from round to round, so servers that cache prompt prefixes can reuse them;
  ``latest_answer`` is empty in the retry text, since the answer is already there.
- ``fresh``: system and one user turn: the task, and from round 2 the retry text
  with the latest answer and its feedback. Old rounds are not sent again.

The system text, and in history mode the task text, are filled with round 1's
values, so they read the same in every round; the fresh task text gets the
current round's.
"""

from __future__ import annotations

import functools
import hashlib
import re
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from plansieve.adapters.guesser import Attempt, GuessRequest
from plansieve.adapters.http_settings import CONVERSATIONS, Prompts
from plansieve.adapters.placeholders import check_text_template, fill_text, names_in
from plansieve.critics.errors import InputError, Spot
from plansieve.critics.limits import Limits, TimeSettings
from plansieve.critics.model import Param, Task
from plansieve.critics.render import expr, number

PROMPT_NAMES: tuple[str, ...] = ("domain", "problem", "limits", "plan_format", "actions",
                                 "round", "task_id", "feedback", "latest_answer")
PARTS: tuple[str, ...] = ("system", "task", "retry")

# One or more blank (or white-space only) lines: the end of a paragraph.
_PARAGRAPH_END = re.compile(r"\n[ \t]*\n(?:[ \t]*\n)*")
_EMPTY_ANSWER = "(an empty answer)"


# -- what the placeholders hold -------------------------------------------------------------

def limits_summary(limits: Limits | None) -> str:
    """The limits file in plain words, one rule a line; "" when there are none."""
    if limits is None or limits.empty:
        return ""
    lines = ["Limits the plan must keep as well (they are checked like the PDDL):"]
    for r in limits.resource:
        unit = f" {r.unit}" if r.unit else ""
        if r.floor is not None and r.ceiling is not None:
            rule = f"must stay between {number(r.floor)} and {number(r.ceiling)}{unit}"
        elif r.floor is not None:
            rule = f"must stay at or above {number(r.floor)}{unit}"
        else:
            rule = f"must stay at or below {number(r.ceiling)}{unit}"
        label = f"{r.label}: " if r.label else ""
        lines.append(f"- {label}{r.fluent} {rule} at every point of the plan")
    for d in limits.deadline:
        label = f"{d.label}: " if d.label else ""
        lines.append(f"- {label}{d.condition} must be true at time {number(d.by)} or earlier")
    t = limits.time
    if t.makespan is not None:
        lines.append(f"- the whole plan must be over by time {number(t.makespan)}")
    if t.clock is not None:
        lines.append(f"- time is the value of {t.clock}, which the actions advance")
    if t.tolerance != TimeSettings().tolerance:
        lines.append(f"- actions that interfere with each other must be at least "
                     f"{number(t.tolerance)} apart in time")
    return "\n".join(lines)


def _is_timed(task: Task) -> bool:
    return bool(task.domain.durative_actions) or bool(task.problem.timed_literals)


def plan_format(task: Task) -> str:
    """How to write the plan: plain steps, or timed steps for temporal tasks."""
    tolerated = ("Nothing else is needed; step numbers, a code fence or a remark after "
                 "';' do no harm.")
    if not _is_timed(task):
        return ("Write the plan with one step per line, in the order the steps are to be "
                "done: the action's name and its arguments in parentheses, like\n"
                "(action-name first-argument second-argument)\n" + tolerated)
    return ("Write the plan with one step per line: the step's start time, a colon, the "
            "action's name and its arguments in parentheses and, for a durative action, "
            "its duration in square brackets, like\n"
            "0.5: (action-name first-argument second-argument) [2]\n"
            "Every step needs a start time; times are numbers counted from 0. " + tolerated)


def _params(params: tuple[Param, ...], typed: bool) -> str:
    """A PDDL typed list: consecutive parameters of one type share it."""
    out: list[str] = []
    for i, p in enumerate(params):
        out.append(p.name)
        last = i + 1 == len(params) or params[i + 1].types != p.types
        if typed and last:
            kind = p.types[0] if len(p.types) == 1 else f"(either {' '.join(p.types)})"
            out += ["-", kind]
    return " ".join(out)


def actions_summary(task: Task) -> str:
    """One line per action schema, with its parameters and their types."""
    domain = task.domain
    typed = any(t != "object" for t in domain.types)
    lines = []
    for a in domain.actions.values():
        lines.append(f"({' '.join(filter(None, (a.name, _params(a.params, typed))))})")
    for a in domain.durative_actions.values():
        head = f"({' '.join(filter(None, (a.name, _params(a.params, typed))))})"
        rules = " and ".join(f"({c.op} ?duration {expr(c.value)})" for c in a.duration)
        lines.append(f"{head}  ; durative" + (f", {rules}" if rules else ""))
    return "\n".join(lines)


def _source_text(task: Task, which: str) -> str:
    part = task.domain if which == "domain" else task.problem
    if part.source is None:
        raise ValueError(f"the task's {which} carries no PDDL text (it was built in code, not "
                         f"read from text), and the prompt shows the {which} as PDDL; read "
                         f"the task with load_task or parse_{which}")
    return part.source.text.strip()


_TASK_VALUES = {
    "domain": lambda task: _source_text(task, "domain"),
    "problem": lambda task: _source_text(task, "problem"),
    "limits": lambda task: limits_summary(task.limits),
    "plan_format": plan_format,
    "actions": actions_summary,
}


# -- templates -----------------------------------------------------------------------------

@dataclass(frozen=True)
class Template:
    """One prompt template: its text and where it came from (None: plansieve's default)."""

    text: str
    path: str | None = None

    def describe(self) -> dict[str, str]:
        """Where the template came from and the sha256 of its text, so an audit can tell
        which wording was sent (the defaults change between versions)."""
        return {"path": self.path or "(plansieve's default)",
                "sha256": hashlib.sha256(self.text.encode()).hexdigest()}


@functools.lru_cache(maxsize=None)
def default_template(part: str) -> Template:
    """plansieve's own template for ``part`` (system, task or retry)."""
    text = resources.files("plansieve.adapters").joinpath("prompts", f"{part}.txt") \
        .read_text(encoding="utf-8")
    check_text_template(text, PROMPT_NAMES, source=f"<default {part} prompt>")
    return Template(text)


def _read_template(path: Path, shown: str, field: str) -> Template:
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError(Spot(shown, None, None, "no such file; expected a prompt template "
                              "(a UTF-8 text file)", field=field)) from None
    except OSError as e:
        raise InputError(Spot(shown, None, None, f"cannot read the prompt template: "
                              f"{e.strerror or e}", field=field)) from None
    try:
        text = data.decode("utf-8-sig").replace("\r\n", "\n")
    except UnicodeDecodeError as e:
        line = data.count(b"\n", 0, e.start) + 1
        column = e.start - (data.rfind(b"\n", 0, e.start) + 1) + 1
        raise InputError(Spot(shown, line, column, f"not UTF-8 text: byte "
                              f"0x{data[e.start]:02x} cannot start a character here; "
                              f"expected a UTF-8 text file", field=field)) from None
    check_text_template(text, PROMPT_NAMES, source=shown)
    return Template(text, shown)


def _render(template: str, values: Mapping[str, str]) -> str:
    """Fill ``template``, leaving out paragraphs whose placeholders all come out empty."""
    pieces: list[tuple[str, str]] = []
    pos = 0
    for m in _PARAGRAPH_END.finditer(template):
        pieces.append((template[pos:m.start()], m.group(0)))
        pos = m.end()
    pieces.append((template[pos:], ""))
    out: list[str] = []
    for paragraph, gap in pieces:
        names = names_in(paragraph)
        if names and all(not str(values[n]).strip() for n in names):
            continue
        out.append(fill_text(paragraph, values) + gap)
    return "".join(out).strip()


_TASKS_KEPT = 64


# -- the book ------------------------------------------------------------------------------

class PromptBook:
    """The three templates in force for one endpoint, and how a round's prompt is built."""

    def __init__(self, system: Template, task: Template, retry: Template) -> None:
        self.templates = {"system": system, "task": task, "retry": retry}
        self._used = frozenset(n for t in self.templates.values() for n in names_in(t.text))
        # The task's values (its PDDL text, actions, limits) for the last few tasks seen:
        # many loops ask about one task, every round. Keyed by id, kept with the task so
        # the id cannot be reused while the entry lives.
        self._values: OrderedDict[int, tuple[Task, dict[str, str]]] = OrderedDict()

    @classmethod
    def load(cls, prompts: Prompts | None = None, base_dir: Path | None = None, *,
             field: str = "guesser.http.prompts") -> "PromptBook":
        """The templates named in ``prompts`` (paths relative to ``base_dir``), defaults else."""
        prompts = prompts or Prompts()
        chosen = {}
        for part in PARTS:
            given = getattr(prompts, part)
            if given is None:
                chosen[part] = default_template(part)
                continue
            path = Path(given).expanduser()
            if not path.is_absolute() and base_dir is not None:
                path = Path(base_dir) / path
            chosen[part] = _read_template(path, str(path), f"{field}.{part}")
        return cls(**chosen)

    def describe(self) -> dict[str, Any]:
        """For each template: its path (or that it is the default) and its text's sha256."""
        return {part: t.describe() for part, t in self.templates.items()}

    # values

    def _task_values(self, task: Task) -> dict[str, str]:
        hit = self._values.get(id(task))
        if hit is not None and hit[0] is task:
            return hit[1]
        values = {name: make(task) for name, make in _TASK_VALUES.items() if name in self._used}
        self._values[id(task)] = (task, values)
        if len(self._values) > _TASKS_KEPT:
            self._values.popitem(last=False)
        return values

    @staticmethod
    def _turn(base: Mapping[str, str], request: GuessRequest, round_: int, feedback: str,
              latest: str) -> dict[str, str]:
        return {**base, "round": str(round_), "task_id": request.task_id,
                "feedback": feedback, "latest_answer": latest}

    def _fill(self, part: str, values: Mapping[str, str]) -> str:
        return _render(self.templates[part].text, values)

    # turns

    def _turns(self, request: GuessRequest, conversation: str) -> list[tuple[str, str]]:
        if conversation not in CONVERSATIONS:
            raise ValueError(f"unknown conversation {conversation!r}; expected one of "
                             f"{', '.join(CONVERSATIONS)}")
        base = self._task_values(request.task)
        first = self._turn(base, request, 1, "", "")
        turns: list[tuple[str, str]] = []
        system = self._fill("system", first)
        if system:
            turns.append(("system", system))
        if conversation == "history":
            turns.append(("user", self._fill("task", first)))
            for attempt in request.history:
                turns.append(("assistant", _answer(attempt)))
                turns.append(("user", self._retry(base, request, attempt, latest="")))
            return turns
        if not request.history:
            turns.append(("user", self._fill("task", first)))
            return turns
        latest = request.history[-1]
        now = self._turn(base, request, request.round, latest.feedback, _answer(latest))
        user = self._fill("task", now) + "\n\n" + self._retry(base, request, latest,
                                                               latest=_answer(latest))
        turns.append(("user", user))
        return turns

    def _retry(self, base: Mapping[str, str], request: GuessRequest, attempt: Attempt, *,
               latest: str) -> str:
        return self._fill("retry", self._turn(base, request, attempt.round + 1,
                                              attempt.feedback, latest))

    def turns(self, request: GuessRequest, conversation: str = "history") \
            -> list[tuple[str, str]]:
        """The round's prompt as (role, text) turns; ``as_messages`` and ``as_prompt``
        give it the two shapes endpoints take."""
        return self._turns(request, conversation)

    def messages(self, request: GuessRequest, conversation: str = "history") \
            -> list[dict[str, str]]:
        """The round's prompt as role/content messages (roles system, user, assistant)."""
        return as_messages(self._turns(request, conversation))

    def prompt(self, request: GuessRequest, conversation: str = "history") -> str:
        """The round's prompt as one text, for endpoints that take a single prompt."""
        return as_prompt(self._turns(request, conversation))

    def system(self, request: GuessRequest) -> str:
        """The system text alone, for bodies that take it apart from the messages."""
        base = self._task_values(request.task)
        return self._fill("system", self._turn(base, request, 1, "", ""))

    def new_turns(self, request: GuessRequest, conversation: str = "history") -> str:
        """What this round adds to the conversation: the text the trace records as sent."""
        if conversation == "fresh" or not request.history:
            turns = self._turns(request, conversation)
            return "\n\n".join(text for _, text in turns)
        base = self._task_values(request.task)
        return self._retry(base, request, request.history[-1], latest="")


def as_messages(turns: list[tuple[str, str]]) -> list[dict[str, str]]:
    """Turns as role/content messages."""
    return [{"role": role, "content": text} for role, text in turns]


def as_prompt(turns: list[tuple[str, str]]) -> str:
    """Turns as one text; earlier answers are marked so the model can tell them apart."""
    out = []
    for role, text in turns:
        if role == "assistant":
            text = f"[your answer, as you gave it]\n{text}\n[end of your answer]"
        out.append(text)
    return "\n\n".join(out)


def _answer(attempt: Attempt) -> str:
    return attempt.text if attempt.text.strip() else _EMPTY_ANSWER
