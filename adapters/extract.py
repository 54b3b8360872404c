"""Tolerant plan extraction from a guesser's free-text answer.

A language model rarely answers with a clean plan file: it numbers its steps,
wraps them in code fences, writes ``load(pkg1, van2)`` instead of
``(load pkg1 van2)``, or embeds a JSON step list in prose. This module reads
what it can and says which step-like lines it could not read, so the loop can
tell the guesser exactly what to fix. It never raises.

The pipeline: split the text into lines -> mark code fences -> take out embedded
JSON step lists -> classify every other line -> read the steps on it -> decide
which failures to report. Which failures count:

* inside a code fence, every line is meant as a step, so every failure counts;
* a line starting with ``(`` (after any list marker or time) always counts;
* a list item that is not readable counts only when its list holds at least one
  readable step (a list of remarks is prose, a list with steps is a plan);
* prose outside lists and fences is ignored; a stand-alone ``action(a, b)`` line
  is read when it reads cleanly and ignored otherwise.

Steps come back in the order they were written, from every place they were
found; names are lower-cased.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, replace
from functools import partial
from typing import Any, Iterable

from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.plan_text import (
    NUMBER_RE,
    StepTextError,
    check_json_step,
    is_name,
    json_path,
    json_syntax_message,
    name_problem,
    scan_step,
)


@dataclass(frozen=True, slots=True)
class UnreadLine:
    """A line that looks like a step but could not be read, and why."""

    line: int  # 1-based
    text: str
    reason: str

    def render(self) -> str:
        return f"line {self.line}: {self.text.strip()} -- {self.reason}"


@dataclass(frozen=True, slots=True)
class Extraction:
    """What was read from a free-text answer, and what was not."""

    plan: Plan
    unread: tuple[UnreadLine, ...] = ()


# --- 1. lines and fences -----------------------------------------------------------

_FENCE = re.compile(r"\s*(```|~~~)")

# Where a line stands: outside any fence, on a fence's opening/closing line, or inside.
_OUT, _MARK, _IN = "out", "mark", "in"


def _fence_places(lines: list[str]) -> list[str]:
    places, open_with = [], None
    for line in lines:
        m = _FENCE.match(line)
        if open_with is None and m:
            places.append(_MARK)
            open_with = m.group(1)
        elif open_with is not None and m and m.group(1) == open_with:
            places.append(_MARK)
            open_with = None
        else:
            places.append(_IN if open_with else _OUT)
    return places


# --- 2. embedded JSON step lists ---------------------------------------------------

# The start of something meant as a JSON step list: a list whose first item is a
# step-like object, or an object holding "steps". Single quotes are matched too, so
# that a Python-style list is reported rather than silently skipped.
_JSON_START = re.compile(
    r"""\[\s*\{\s*["'](?:action|args|time|duration)["']|\{\s*["']steps["']\s*:""")
_JSON_SPACE = " \t\n\r"


@dataclass(slots=True)
class _Found:
    """Steps and unread lines, keyed by where they were written."""

    steps: list[tuple[int, int, PlanStep]]  # (line, order on the line, step)
    unread: dict[int, str]  # line -> reason (the first reason wins)

    def step(self, line: int, step: PlanStep) -> None:
        self.steps.append((line, len(self.steps),
                           PlanStep(step.action, step.args, step.time, step.duration, line)))

    def fail(self, line: int, reason: str) -> None:
        self.unread.setdefault(line, reason)


def _skip_json_space(text: str, i: int) -> int:
    while i < len(text) and text[i] in _JSON_SPACE:
        i += 1
    return i


def _members(text: str, start: int) -> list[tuple[Any, Any, int]]:
    """(key or index, value, where the value starts) for the JSON container at ``start``.

    Only called on text already known to decode, so it walks without checks.
    """
    decoder = json.JSONDecoder()
    out: list[tuple[Any, Any, int]] = []
    i = _skip_json_space(text, start + 1)
    if text[i] in "]}":
        return out
    while True:
        if text[start] == "{":
            key, i = decoder.raw_decode(text, i)
            i = _skip_json_space(text, _skip_json_space(text, i) + 1)  # past ':'
        else:
            key = len(out)
        value, end = decoder.raw_decode(text, i)
        out.append((key, value, i))
        i = _skip_json_space(text, end)
        if text[i] != ",":
            return out
        i = _skip_json_space(text, i + 1)


def _naive_end(text: str, start: int, limit: int) -> int:
    """Where a broken JSON value probably ends: brackets balanced, or ``limit``."""
    depth, quote, i = 0, None, start
    while i < limit:
        c = text[i]
        if quote:
            if c == "\\":
                i += 1
            elif c == quote:
                quote = None
        elif c in "\"'":
            quote = c
        elif c in "[{":
            depth += 1
        elif c in "]}":
            depth -= 1
            if depth == 0:
                return i + 1
        i += 1
    return limit


def _take_json(text: str, offsets: list[int], places: list[str], found: _Found) -> set[int]:
    """Read every JSON step list in ``text``; return the 1-based lines they cover."""
    covered: set[int] = set()
    decoder = json.JSONDecoder()
    pos = 0
    while (m := _JSON_START.search(text, pos)) is not None:
        start = m.start()
        first = _line_of(offsets, start)
        try:
            value, end = decoder.raw_decode(text, start)
        except (ValueError, RecursionError) as err:
            end = _naive_end(text, start, _fence_end(text, offsets, places, first))
            where = err.pos if isinstance(err, json.JSONDecodeError) else start
            line = _line_of(offsets, min(where, max(end - 1, start)))
            reason = (json_syntax_message(err, text) if isinstance(err, json.JSONDecodeError)
                      else "this JSON is nested too deeply or holds a number too long to read")
            found.fail(line, f"the JSON step list cannot be read: {reason}")
        else:
            _json_steps(text, start, value, offsets, found)
        covered.update(range(first, _line_of(offsets, max(end - 1, start)) + 1))
        pos = max(end, start + 1)
    return covered


def _json_steps(text: str, start: int, value: Any, offsets: list[int], found: _Found) -> None:
    """Steps of a decoded step list (or {"steps": ...}), each at the line it starts on."""
    prefix = "steps"  # paths read as in read_plan_json: steps[3].args[1]
    if isinstance(value, dict):
        where = {key: at for key, _, at in _members(text, start)}
        items = value.get("steps")
        if not isinstance(items, list):
            found.fail(_line_of(offsets, where.get("steps", start)),
                       "the JSON \"steps\" field should be a list of steps")
            return
        start = where["steps"]
    for index, item, at in _members(text, start):
        line = _line_of(offsets, at)
        model, problems = check_json_step(item, loose=True)
        if model is not None:
            found.step(line, model.to_step())
        else:
            loc, message = problems[0]
            found.fail(line, f"{json_path(f'{prefix}[{index}]', loc)}: {message}")


def _line_of(offsets: list[int], pos: int) -> int:
    """1-based line holding character ``pos`` (``offsets`` are the line starts)."""
    lo, hi = 0, len(offsets) - 1
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if offsets[mid] <= pos:
            lo = mid
        else:
            hi = mid - 1
    return lo + 1


def _fence_end(text: str, offsets: list[int], places: list[str], line: int) -> int:
    """Character index where the fence holding ``line`` closes (or the text ends)."""
    if places[line - 1] != _IN:
        return len(text)
    for n in range(line, len(places)):
        if places[n] == _MARK:
            return offsets[n]
    return len(text)


# --- 3. classifying a line ---------------------------------------------------------

# List markers: bullets, "1." / "1)", and "Step 3:" (with optional ':', '.', ')' or dash).
_MARKER = re.compile(
    r"\s*(?:[-*+\u2022\u2023\u25e6\u00b7]\s+|[0-9]+[.)](?:\s+|(?=\())|step\s*[0-9]+\s*[:.)\-\u2013\u2014]?\s*)",
    re.IGNORECASE)
_TIME_PREFIX = re.compile(rf"\s*({NUMBER_RE.pattern})\s*:\s*")
# A call is a name touching its '(': "load(pkg1, van2)". "Note (see above)" is prose.
_CALL_START = re.compile(r"\s*[A-Za-z][A-Za-z0-9_-]*\(")
_DURATION = re.compile(rf"\s*\[\s*({NUMBER_RE.pattern})\s*\]")
_EMPHASIS = re.compile(r"\*\*|`")


@dataclass(frozen=True, slots=True)
class _Line:
    number: int
    text: str  # as written
    content: str  # markers and markdown emphasis removed
    place: str  # _OUT or _IN
    is_item: bool  # a list item outside fences
    list_id: int | None  # which run of list items it belongs to


def _classify(lines: list[str], places: list[str], skip: set[int]) -> list[_Line]:
    """The lines worth reading, with list membership worked out."""
    out: list[_Line] = []
    list_id, next_id = None, 0
    for number, (text, place) in enumerate(zip(lines, places), start=1):
        if place == _MARK or number in skip:
            list_id = None
            continue
        if place == _IN:
            list_id = None
            content = text
            m = _MARKER.match(content)
            if m:
                content = content[m.end():]
            out.append(_Line(number, text, content, _IN, False, None))
            continue
        if not text.strip():
            continue  # blank lines do not end a list
        content = _EMPHASIS.sub("", text)
        m = _MARKER.match(content)
        if m is None:
            if not text[:1].isspace():
                list_id = None  # flush-left prose ends a list; indented text continues it
            out.append(_Line(number, text, content.strip(), _OUT, False, None))
            continue
        if list_id is None:
            list_id, next_id = next_id, next_id + 1
        out.append(_Line(number, text, content[m.end():].strip(), _OUT, True, list_id))
    return out


# --- 4. reading the steps on a line ------------------------------------------------

# Between two steps on one line: spaces, commas, arrows.
_BETWEEN = re.compile(r"(?:\s|,|->|=>|\u2192)*")
# What may introduce a remark after the steps.
_REMARK = ("#", "//", "-", "\u2013", "\u2014", ":", "=")


class _Unreadable(Exception):
    """A step-like text that cannot be read; the message is the reason."""


def _is_sexpr(content: str) -> bool:
    if content.startswith("("):
        return True
    m = _TIME_PREFIX.match(content)
    return m is not None and content[m.end():].startswith("(")


# The common case, one untimed step alone on its line: read without the general scanner.
_PLAIN_STEP = re.compile(r"\(\s*([A-Za-z][A-Za-z0-9_-]*(?:\s+[A-Za-z][A-Za-z0-9_-]*)*)\s*\)\s*")


def _read_sexprs(content: str, steps: list[PlanStep]) -> None:
    """``(a x) (b y) [2]``... with optional times; commas or arrows may separate them.

    Steps are appended to ``steps`` as they are read, so a failure keeps the ones before.
    """
    body = content.split(";", 1)[0]
    plain = _PLAIN_STEP.fullmatch(body)
    if plain is not None:
        words = plain.group(1).lower().split()
        steps.append(PlanStep(words[0], tuple(words[1:])))
        return
    i = 0
    while True:
        try:
            step, i = scan_step(body, i)
        except StepTextError as err:
            raise _Unreadable(err.message) from None
        steps.append(step)
        i = _BETWEEN.match(body, i).end()
        if i >= len(body) or not _is_sexpr(body[i:]):
            _check_remark(body[i:])
            return


def _check_remark(rest: str) -> None:
    """Text after the last step: a remark is fine unless it seems to hide more steps."""
    rest = rest.strip()
    if rest and not rest.startswith(_REMARK) and "(" in rest:
        raise _Unreadable(f"could not read the text after the step: '{_clip(rest)}'")


def _is_call(content: str) -> bool:
    t = _TIME_PREFIX.match(content)
    return _CALL_START.match(content, t.end() if t else 0) is not None


def _read_calls(content: str, steps: list[PlanStep], *, whole_line: bool = False) -> None:
    """``load(pkg1, van2)`` style, optionally timed, several a line allowed.

    With ``whole_line`` nothing but steps may stand on the line (a stand-alone line
    outside lists must leave no doubt that it is a step and not a sentence).
    """
    i = 0
    while True:
        time = None
        t = _TIME_PREFIX.match(content, i)
        if t is not None and _CALL_START.match(content, t.end()):
            time, i = float(t.group(1)), t.end()
        step, i = _read_call(content, i)
        steps.append(replace(step, time=time) if time is not None else step)
        i = _BETWEEN.match(content, i).end()
        if i >= len(content) or not _is_call(content[i:]):
            rest = content[i:].strip().rstrip(";.")
            if whole_line and rest:
                raise _Unreadable(f"text after the step: '{_clip(rest)}'")
            _check_remark(rest)
            return


def _read_call(content: str, i: int) -> tuple[PlanStep, int]:
    m = _CALL_START.match(content, i)
    if m is None:
        raise _Unreadable(f"expected a step like action(arg, ...) — found '{_clip(content[i:])}'")
    action = content[m.start():m.end() - 1].strip()
    close = content.find(")", m.end())
    if close == -1:
        raise _Unreadable("missing closing ')'")
    inner = content[m.end():close]
    if "(" in inner:
        raise _Unreadable("unexpected '(' inside a step: steps do not nest")
    args = [a.strip().strip("\"'") for a in re.split(r"[,\s]+", inner.strip()) if a.strip()]
    for a in args:
        if not is_name(a):
            raise _Unreadable(name_problem(a)[1])
    i = close + 1
    duration = None
    d = _DURATION.match(content, i)
    if d is not None:
        duration, i = float(d.group(1)), d.end()
    step = PlanStep(action.lower(), tuple(a.lower() for a in args), None, duration)
    _check_finite(step)
    return step, i


def _check_finite(step: PlanStep) -> None:
    for what, value in (("time", step.time), ("duration", step.duration)):
        if value is not None and not math.isfinite(value):
            raise _Unreadable(f"{what} must be a finite number")


# A bare-words step ends where a remark begins: " - ", dashes, ':', '#', '//', ';', '('.
_WORDS_END = re.compile(r"\s+-{1,2}\s|\s*[\u2013\u2014]|[:#;(]|//")


def _read_words(content: str, steps: list[PlanStep], actions: frozenset[str] | None) -> None:
    """``pick a b`` (optionally timed); the first word must be a known action if we know them."""
    time = None
    t = _TIME_PREFIX.match(content)
    if t is not None:
        time, content = float(t.group(1)), content[t.end():]
    cut = _WORDS_END.search(content)
    words = (content[:cut.start()] if cut else content).split()
    if not words:
        raise _Unreadable(f"expected a step like (action arg ...) — found '{_clip(content)}'")
    head = words[0].lower()
    if actions is not None and head not in actions:
        if is_name(words[0]):
            raise _Unreadable(f"'{_clip(head)}' is not one of the domain's actions")
        raise _Unreadable(f"expected a step like (action arg ...) — found '{_clip(words[0])}'")
    if actions is not None:
        words[-1] = words[-1].removesuffix(".")  # a known action: the '.' ends the item
    for w in words:
        if not is_name(w):
            raise _Unreadable(name_problem(w)[1])
    step = PlanStep(head, tuple(w.lower() for w in words[1:]), time)
    _check_finite(step)
    steps.append(step)


def _clip(s: str, limit: int = 40) -> str:
    return s if len(s) <= limit else s[:limit] + "..."


# --- 5. putting it together --------------------------------------------------------

_COMMENT = re.compile(r"\s*(?:;|#|//|$)")


def _read_line(line: _Line, actions: frozenset[str] | None) -> tuple[list[PlanStep], str | None, bool]:
    """The steps on one line, why the rest failed (None if it did not), and whether
    that failure counts on its own (True) or only inside a plan list (False)."""
    content = line.content
    in_fence = line.place == _IN
    if _COMMENT.match(content):
        return [], None, False
    if _is_sexpr(content):
        return (*_attempt(_read_sexprs, content), True)
    if _is_call(content):
        if in_fence or line.is_item:
            return (*_attempt(_read_calls, content), in_fence)
        steps, reason = _attempt(partial(_read_calls, whole_line=True), content)
        return (steps, None, False) if reason is None else ([], None, False)
    if in_fence or line.is_item:
        return (*_attempt(partial(_read_words, actions=actions), content), in_fence)
    return [], None, False  # prose


def _attempt(reader, content: str) -> tuple[list[PlanStep], str | None]:
    """Run a step reader: the steps it read, and the reason it stopped early (or None)."""
    steps: list[PlanStep] = []
    try:
        reader(content, steps)
    except _Unreadable as err:
        return steps, str(err)
    return steps, None


# A line holding one untimed step and perhaps a comment, and a line the general reader
# would take for prose: no brackets, fences or list marker.
_PLAIN_LINE = re.compile(
    r"\s*\(\s*([A-Za-z][A-Za-z0-9_-]*(?:\s+[A-Za-z][A-Za-z0-9_-]*)*)\s*\)\s*(?:;.*)?")
_NOT_PROSE = re.compile(r"[(\[{`~]")


def _plain_answer(text: str) -> Extraction | None:
    """The common clean answer — step lines and plain prose only — read in one pass.

    Returns None when the answer has anything else (lists, fences, JSON, calls,
    times); the general reader then takes it. Both give the same result on the
    answers this one accepts (a property test compares them).
    """
    steps: list[PlanStep] = []
    for number, line in enumerate(text.splitlines(), 1):
        m = _PLAIN_LINE.fullmatch(line)
        if m is not None:
            words = m.group(1).lower().split()
            steps.append(PlanStep(words[0], tuple(words[1:]), None, None, number))
        elif _NOT_PROSE.search(line) or _MARKER.match(_EMPHASIS.sub("", line)):
            return None
    return Extraction(Plan(tuple(steps)), ())


def extract_plan(text: str, action_names: Iterable[str] | None = None) -> Extraction:
    """Read the steps out of a guesser's answer; never raises.

    ``action_names`` (the domain's actions) lets a bare ``pick a b`` list item
    count as a step only when ``pick`` is one of them. Other step forms are read
    whatever their action: judging the action is the critics' job.
    """
    text = str(text)
    plain = _plain_answer(text)
    return plain if plain is not None else _extract(text, action_names)


def _extract(text: str, action_names: Iterable[str] | None) -> Extraction:
    actions = None if action_names is None else frozenset(str(a).lower() for a in action_names)
    lines = text.splitlines()
    offsets, at = [], 0
    for chunk in text.splitlines(keepends=True):
        offsets.append(at)
        at += len(chunk)
    offsets = offsets or [0]
    places = _fence_places(lines)
    found = _Found([], {})
    covered = _take_json(text, offsets, places, found)

    pending: dict[int, list[tuple[int, str]]] = {}  # list id -> failures waiting for a step
    lists_with_steps: set[int] = set()
    for line in _classify(lines, places, covered):
        steps, reason, strong = _read_line(line, actions)
        for step in steps:
            found.step(line.number, step)
        if steps and line.list_id is not None:
            lists_with_steps.add(line.list_id)
        if reason is not None:
            if strong:
                found.fail(line.number, reason)
            elif line.list_id is not None:
                pending.setdefault(line.list_id, []).append((line.number, reason))
    for list_id in lists_with_steps:
        for number, reason in pending.get(list_id, ()):
            found.fail(number, reason)

    steps = tuple(step for _, _, step in sorted(found.steps, key=lambda t: (t[0], t[1])))
    unread = tuple(UnreadLine(n, lines[n - 1], r) for n, r in sorted(found.unread.items()))
    return Extraction(Plan(steps), unread)
