"""Plan readers: the plan-file format and the JSON step list.

The plan file holds one step a line, with optional start time and duration::

    ; deliveries for the morning round
    (load pkg1 van2)
    0.003: (drive van2 depot quay) [2.5]   ; a timed step

The JSON form is what an agent back end produces::

    [{"action": "load", "args": ["pkg1", "van2"], "time": 0.0, "duration": 2.5}, ...]

or the same list under ``{"steps": [...]}``. Both readers look at every line (or
step) before complaining, so one PlanReadError lists every problem at once.
Names are lower-cased because PDDL names are case-insensitive. Either every step
carries a time or none does: a half-timed plan has no single meaning.
"""

from __future__ import annotations

import json
import math
import os
import re
from dataclasses import replace
from typing import Annotated, Any

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, ValidationError
from pydantic_core import PydanticCustomError

from plansieve.critics.errors import PlanReadError, Spot
from plansieve.critics.plan import Plan, PlanStep

# A PDDL name: a letter, then letters, digits, '-' or '_' (the PDDL 3.1 BNF's <name>).
NAME_RE = re.compile(r"[A-Za-z][A-Za-z0-9_-]*")
# A non-negative decimal number, exponent allowed so that every float Plan.to_text
# writes (``1e-05``) reads back.
NUMBER_RE = re.compile(r"(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")

_NAME_RULE = "a name starts with a letter and continues with letters, digits, '-' or '_'"
# Characters that end a word inside a step.
_WORD_END = frozenset("()[];")


class StepTextError(Exception):
    """One step that cannot be read: the 1-based column and what was expected there.

    Internal to the readers: read_plan turns it into a Spot, extraction into a reason.
    """

    def __init__(self, column: int, message: str) -> None:
        super().__init__(message)
        self.column = column
        self.message = message


def is_name(word: str) -> bool:
    """True when ``word`` is a valid PDDL name (any case)."""
    return NAME_RE.fullmatch(word) is not None


def name_problem(word: str) -> tuple[int, str]:
    """Why ``word`` is not a name: offset of the first bad character and a message."""
    if word.startswith("?"):
        return 0, f"'{word}' is a variable; a plan step names objects, not variables"
    bad = 0 if not word[:1].isascii() or not word[:1].isalpha() else next(
        i for i, c in enumerate(word) if not (c.isascii() and (c.isalnum() or c in "-_")))
    return bad, f"'{_clip(word)}' is not a valid name: {_NAME_RULE}"


def _clip(s: str, limit: int = 24) -> str:
    """Shorten ``s`` for a message, with unprintable characters escaped."""
    s = s if len(s) <= limit else s[:limit] + "..."
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in s)


def _skip_space(text: str, i: int) -> int:
    while i < len(text) and text[i].isspace():
        i += 1
    return i


def found(text: str, i: int) -> str:
    """Words for what sits at ``text[i]``: a quoted word or 'the end of the line'."""
    if i >= len(text):
        return "the end of the line"
    if text[i] in _WORD_END or text[i] in ":,":
        return f"'{text[i]}'"
    j = i
    while j < len(text) and not text[j].isspace() and text[j] not in _WORD_END:
        j += 1
    return f"'{_clip(text[i:j])}'"


def _read_word(text: str, i: int, what: str) -> tuple[str, int]:
    """A name starting at ``i``; raise StepTextError saying ``what`` was expected."""
    j = i
    while j < len(text) and not text[j].isspace() and text[j] not in _WORD_END:
        j += 1
    word = text[i:j]
    if not word:
        raise StepTextError(i + 1, f"expected {what} — found {found(text, i)}")
    if not is_name(word):
        offset, message = name_problem(word)
        raise StepTextError(i + offset + 1, message)
    return word, j


def _read_time(text: str, i: int) -> tuple[float, int]:
    """``number :`` at ``i``; return the time and the index just past the colon."""
    negative = text[i] == "-"
    m = NUMBER_RE.match(text, i + negative)
    if m is None:
        colon, paren = text.find(":", i), text.find("(", i)
        if colon != -1 and (paren == -1 or colon < paren):
            raise StepTextError(i + 1, f"expected a number before ':' — found {found(text, i)}")
        raise StepTextError(
            i + 1, f"expected a step like (action arg ...) — found {found(text, i)}")
    j = _skip_space(text, m.end())
    if j >= len(text) or text[j] != ":":
        raise StepTextError(
            j + 1, f"expected ':' after the time {_clip(m.group())} — found {found(text, j)}")
    if negative:
        raise StepTextError(
            i + 1, f"time must be a non-negative number — found -{_clip(m.group())}")
    value = float(m.group())
    if not math.isfinite(value):
        raise StepTextError(i + 1, f"time must be a finite number — found {_clip(m.group())}")
    return value, j + 1


def _read_duration(text: str, i: int) -> tuple[float, int]:
    """``[ number ]`` with ``text[i] == '['``; return the duration and the index past ']'."""
    k = _skip_space(text, i + 1)
    negative = k < len(text) and text[k] == "-"
    m = NUMBER_RE.match(text, k + negative)
    if m is None:
        raise StepTextError(k + 1, f"expected a number inside '[...]' — found {found(text, k)}")
    if negative:
        raise StepTextError(
            k + 1, f"duration must be a non-negative number — found -{_clip(m.group())}")
    e = _skip_space(text, m.end())
    if e >= len(text):
        raise StepTextError(m.end() + 1, "missing closing ']' after the duration")
    if text[e] != "]":
        raise StepTextError(e + 1, f"expected ']' after the duration — found {found(text, e)}")
    value = float(m.group())
    if not math.isfinite(value):
        raise StepTextError(k + 1, f"duration must be a finite number — found {_clip(m.group())}")
    return value, e + 1


def scan_step(text: str, pos: int = 0) -> tuple[PlanStep, int]:
    """Read ``[time:] (action arg ...) [[duration]]`` starting at ``pos``.

    Returns the step (names lower-cased, no line) and the index just past it;
    whatever follows is the caller's business. Raises StepTextError.
    """
    i = _skip_space(text, pos)
    time = None
    if i < len(text) and text[i] != "(":
        time, i = _read_time(text, i)
        i = _skip_space(text, i)
        if i >= len(text) or text[i] != "(":
            raise StepTextError(
                i + 1, f"expected '(' to open the step after the time — found {found(text, i)}")
    if i >= len(text):
        raise StepTextError(i + 1, "expected a step like (action arg ...) — found the end of the line")
    i = _skip_space(text, i + 1)
    if i >= len(text):
        raise StepTextError(i + 1, "expected an action name after '(' — found the end of the line")
    action, i = _read_word(text, i, "an action name after '('")
    args: list[str] = []
    last = i
    while True:
        i = _skip_space(text, i)
        if i >= len(text):
            raise StepTextError(last + 1, "missing closing ')'")
        c = text[i]
        if c == ")":
            i += 1
            break
        if c == "(":
            raise StepTextError(i + 1, "unexpected '(' inside a step: steps do not nest")
        if c in "[];":
            raise StepTextError(i + 1, f"expected ')' to close the step — found '{c}'")
        arg, i = _read_word(text, i, "an argument name")
        args.append(arg)
        last = i
    duration = None
    j = _skip_space(text, i)
    if j < len(text) and text[j] == "[":
        duration, i = _read_duration(text, j)
    step = PlanStep(action.lower(), tuple(a.lower() for a in args), time, duration)
    return step, i


# --- the plan file -----------------------------------------------------------------


# The common untimed line, ``(action arg ...)`` with an optional comment, read in one match;
# anything else goes through scan_step, which also explains what is wrong.
_PLAIN_STEP = re.compile(
    r"\s*\(\s*([A-Za-z][A-Za-z0-9_-]*)((?:\s+[A-Za-z][A-Za-z0-9_-]*)*)\s*\)\s*(?:;.*)?")


def read_plan(text: str, filename: str = "<plan>") -> Plan:
    """Read a plan file's text; raise PlanReadError naming every bad line."""
    lines = text.removeprefix("\ufeff").splitlines()
    steps: list[PlanStep] = []
    spots: list[Spot] = []
    plain = _PLAIN_STEP.fullmatch
    for number, line in enumerate(lines, start=1):
        m = plain(line)
        if m is not None:
            steps.append(PlanStep(m[1].lower(), tuple(m[2].lower().split()), None, None, number))
            continue
        body = line.split(";", 1)[0]
        start = _skip_space(body, 0)
        if start == len(body):
            continue
        try:
            step, end = scan_step(body, start)
            rest = _skip_space(body, end)
            if rest < len(body):
                raise StepTextError(
                    rest + 1,
                    f"unexpected text after the step — found {found(body, rest)}; "
                    "write one step a line")
        except StepTextError as err:
            spots.append(Spot(filename, number, err.column, err.message, line))
            continue
        steps.append(replace(step, line=number))
    for i in _mixed_timing(steps):
        line = lines[steps[i].line - 1]
        spots.append(Spot(filename, steps[i].line, _skip_space(line, 0) + 1,
                          _mixed_message(steps[i].time is not None,
                                         f"the step on line {steps[0].line}"),
                          line))
    if spots:
        spots.sort(key=lambda s: (s.line or 0, s.column or 0))
        raise PlanReadError(spots)
    return Plan(tuple(steps), source=filename)


def _mixed_timing(steps: list[PlanStep]) -> list[int]:
    """Indexes of the steps that carry a time when the first does not, or the reverse."""
    if not steps:
        return []
    timed = steps[0].time is not None
    return [i for i, s in enumerate(steps) if (s.time is not None) != timed]


def _mixed_message(this_timed: bool, first: str) -> str:
    if this_timed:
        return (f"this step has a start time but {first} has none; "
                "give every step a time or none")
    return (f"this step has no start time but {first} has one; "
            "give every step a time or none")


# --- the JSON step list ------------------------------------------------------------


def _check_name(value: str) -> str:
    if not is_name(value):
        _, message = name_problem(value)
        raise PydanticCustomError("plan_name", message)
    return value


_Name = Annotated[str, AfterValidator(_check_name)]
_Number = Annotated[float, Field(ge=0, allow_inf_nan=False)]


class JsonStep(BaseModel):
    """One step of a JSON step list, as it arrives."""

    model_config = ConfigDict(extra="forbid", strict=True, frozen=True)

    action: _Name
    args: list[_Name] = []
    time: _Number | None = None
    duration: _Number | None = None

    def to_step(self, line: int | None = None) -> PlanStep:
        return PlanStep(self.action.lower(), tuple(a.lower() for a in self.args),
                        self.time, self.duration, line=line)


class _LooseJsonStep(JsonStep):
    """The same step, ignoring extra keys (extraction is tolerant of chatty guessers)."""

    model_config = ConfigDict(extra="ignore", strict=True, frozen=True)


_STEP_FIELDS = "'action', 'args', 'time' and 'duration'"


def json_kind(value: Any) -> str:
    """A JSON value described in words: 'a string "x"', 'a number 3', 'a list'..."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"the number {_clip(repr(value))}"
    if isinstance(value, int):
        return f"the number {value}" if value.bit_length() < 64 else "a very large number"
    if isinstance(value, str):
        return f"the string {_clip(json.dumps(value))}"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "an object"
    return f"a Python {type(value).__name__}"


def json_path(prefix: str, loc: tuple[Any, ...]) -> str:
    """``("args", 1)`` under ``steps[3]`` -> ``steps[3].args[1]``."""
    out = prefix
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", str(part)):
            out += f".{part}" if out else str(part)
        else:
            out += f"[{json.dumps(str(part))}]"
    return out


def _explain(error: dict[str, Any]) -> str:
    """One pydantic error in our words; never pydantic's own message."""
    kind, loc, value = error["type"], error["loc"], error.get("input")
    field = str(loc[-1]) if loc and isinstance(loc[-1], str) else None
    if kind == "missing":
        return f"this step has no '{field}' field; every step needs one"
    if kind == "extra_forbidden":
        return f"unknown field '{_clip(str(field))}'; a step has only {_STEP_FIELDS}"
    if kind in ("model_type", "model_attributes_type", "dict_type"):
        return ('expected a step object like {"action": "load", "args": ["pkg1", "van2"]} '
                f"— found {json_kind(value)}")
    if kind == "list_type":
        return f"expected a list of argument names — found {json_kind(value)}"
    if kind == "string_type":
        return f"expected a name in double quotes — found {json_kind(value)}"
    if kind == "plan_name":
        return error["msg"]  # our own words, raised by _check_name
    what = field if field in ("time", "duration") else "this value"
    if kind in ("float_type", "float_parsing"):
        if isinstance(value, int) and not isinstance(value, bool):
            return f"{what} must be a finite number — found a number too large to use"
        return f"{what} must be a number — found {json_kind(value)}"
    if kind == "greater_than_equal":
        return f"{what} must be a non-negative number — found {json_kind(value)}"
    if kind == "finite_number":
        return f"{what} must be a finite number — found {json_kind(value)}"
    return f"{what} is not allowed here — found {json_kind(value)}"


def check_json_step(obj: Any, *, loose: bool = False) -> tuple[JsonStep | None, list[tuple[tuple, str]]]:
    """Validate one JSON step: the model, or a list of (location, message) problems."""
    model = _LooseJsonStep if loose else JsonStep
    try:
        return model.model_validate(obj), []
    except ValidationError as err:
        return None, [(tuple(e["loc"]), _explain(e)) for e in err.errors()]


def read_plan_json(text_or_obj: Any, filename: str = "<plan.json>") -> Plan:
    """Read a JSON step list (text, or already-parsed lists and dicts).

    Problems name the field path (``steps[3].args[1]``, counting from 0 as JSON
    does, whether or not the list sat under ``"steps"``); syntax errors also give
    line and column.
    """
    if isinstance(text_or_obj, str):
        data = _decode_json(text_or_obj.removeprefix("\ufeff"), filename)
    else:
        data = text_or_obj
    if isinstance(data, dict):
        extra = [k for k in data if k != "steps"]
        spots = [Spot(filename, None, None,
                      f"unknown field '{_clip(str(k))}'; the object holds only 'steps'",
                      field=json_path("", (k,))) for k in extra]
        if "steps" not in data:
            spots.append(Spot(filename, None, None,
                              "missing field 'steps' (the list of steps)", field="steps"))
            raise PlanReadError(spots)
        items = data["steps"]
        if not isinstance(items, list):
            spots.append(Spot(filename, None, None,
                              f"expected a list of steps — found {json_kind(items)}",
                              field="steps"))
            raise PlanReadError(spots)
    elif isinstance(data, list):
        items, spots = data, []
    else:
        raise PlanReadError(Spot(
            filename, None, None,
            'expected a list of steps or an object {"steps": [...]} — found '
            + json_kind(data)))
    steps: list[PlanStep] = []
    for index, item in enumerate(items):
        model, problems = check_json_step(item)
        for loc, message in problems:
            spots.append(Spot(filename, None, None, message,
                              field=json_path(f"steps[{index}]", loc)))
        if model is not None:
            steps.append(model.to_step())
    if not spots:  # every item became a step, so step i is steps[i] in the JSON
        for i in _mixed_timing(steps):
            spots.append(Spot(filename, None, None,
                              _mixed_message(steps[i].time is not None, "steps[0]"),
                              field=f"steps[{i}].time"))
    if spots:
        raise PlanReadError(spots)
    return Plan(tuple(steps), source=filename)


_JSON_MESSAGES = (
    ("Expecting value", "expected a JSON value (list, object, string, number, true, false or null)"),
    ("Expecting property name", "expected a field name in double quotes"),
    ("Expecting ':'", "expected ':' between a field name and its value"),
    ("Expecting ','", "expected ',' between items, or the closing bracket"),
    ("Unterminated string", "this string has no closing '\"'"),
    ("Invalid control character", "a raw control character cannot sit inside a string; escape it"),
    ("Invalid \\u", "a \\u escape needs exactly four hex digits"),
    ("Invalid \\escape", "unknown escape sequence in a string"),
    ("Extra data", "unexpected text after the end of the JSON value"),
    ("Illegal trailing comma", "a comma cannot come right before a closing bracket"),
)


def json_syntax_message(err: json.JSONDecodeError, text: str) -> str:
    """The decoder's complaint in our words, with what was found at the spot."""
    message = next((ours for theirs, ours in _JSON_MESSAGES if err.msg.startswith(theirs)),
                   "this is not valid JSON")
    if not text.strip():
        return "the input is empty; expected a JSON list of steps"
    return f"{message} — found {found(text, err.pos)}"


def line_col(text: str, pos: int) -> tuple[int, int, str]:
    """1-based line and column of character ``pos``, counting lines as splitlines does."""
    start = 0
    lines = text.splitlines(keepends=True)
    for number, chunk in enumerate(lines, start=1):
        if pos < start + len(chunk) or number == len(lines):
            body = chunk.rstrip("\r\n\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029")
            return number, min(pos - start, len(body)) + 1, body
        start += len(chunk)
    return 1, 1, ""


def _decode_json(text: str, filename: str) -> Any:
    try:
        return json.loads(text)
    except json.JSONDecodeError as err:
        line, column, shown = line_col(text, err.pos)
        raise PlanReadError(Spot(filename, line, column, json_syntax_message(err, text),
                                 shown)) from None
    except RecursionError:
        raise PlanReadError(Spot(filename, None, None,
                                 "the JSON is nested too deeply to read")) from None
    except ValueError:  # e.g. an integer with thousands of digits
        raise PlanReadError(Spot(filename, None, None,
                                 "the JSON holds a number too long to read")) from None


# --- files -------------------------------------------------------------------------


def load_plan(path: str | os.PathLike[str]) -> Plan:
    """Read a plan file: JSON when it starts with '[' or '{', else the plan-file format."""
    name = os.fspath(path)
    try:
        with open(name, "rb") as f:
            raw = f.read()
    except FileNotFoundError:
        raise PlanReadError(Spot(name, None, None, "cannot open the plan: no such file")) from None
    except IsADirectoryError:
        raise PlanReadError(Spot(name, None, None,
                                 "cannot open the plan: this is a directory")) from None
    except PermissionError:
        raise PlanReadError(Spot(name, None, None,
                                 "cannot open the plan: permission denied")) from None
    except OSError as err:
        raise PlanReadError(Spot(name, None, None,
                                 f"cannot read the plan: {err.strerror or err}")) from None
    raw = raw.removeprefix(b"\xef\xbb\xbf")  # a UTF-8 byte-order mark is not content
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        prefix = raw[:err.start].decode("utf-8")
        # a stand-in character where the bad byte was, so a lone '\r' before it stays a line end
        line, column, _ = line_col(prefix + "?", len(prefix))
        shown = raw.decode("utf-8", errors="replace").splitlines()[line - 1]
        raise PlanReadError(Spot(
            name, line, column,
            f"the file is not UTF-8 text: byte 0x{raw[err.start]:02x} cannot be decoded",
            shown)) from None
    return read_plan_auto(text, name)


def read_plan_auto(text: str, filename: str = "<plan>") -> Plan:
    """Plan text in either form: JSON when it starts with '[' or '{', else the plan file."""
    if text.removeprefix("\ufeff").lstrip()[:1] in ("[", "{"):
        return read_plan_json(text, filename)
    return read_plan(text, filename)
