"""The limits file: resource bounds, deadlines and time settings beside a PDDL task.

An agent back end can say "the budget never goes above 800 EUR" or "(delivered kit3)
by 14.5" without writing PDDL3. The file is TOML or JSON::

    [[resource]]
    fluent = "(charge carrier-7)"
    floor = 6
    unit = "kWh"
    label = "battery reserve"

    [[deadline]]
    condition = "(inspected reefer-12)"
    by = 14.5

    [time]
    makespan = 40          # the whole plan must end by then
    clock = "(clock)"      # sequential plans: read time on this fluent
    tolerance = 0.001      # happenings closer than this must not interfere

``load_limits`` reads and validates the file on its own; ``attach_limits`` checks
its PDDL pieces against a task (functions declared, objects known, types fitting)
and returns the task carrying them. Errors name the file and the field.
"""

from __future__ import annotations

import dataclasses
import functools
import json
import re
import sys
from os import PathLike
from pathlib import Path
from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from plansieve.critics.errors import InputError, Spot
from plansieve.critics.model import Formula, Task

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


# A finite number written as one: not text, not true/false, not inf or nan.
FiniteNumber = Annotated[float, Field(strict=True, allow_inf_nan=False)]


class ResourceLimit(_Frozen):
    """A numeric fluent that must stay at or above ``floor`` and at or below ``ceiling``."""

    fluent: str = Field(description='A ground function term in PDDL, e.g. "(charge carrier-7)".')
    floor: FiniteNumber | None = None
    ceiling: FiniteNumber | None = None
    unit: str | None = None
    label: str | None = None

    @model_validator(mode="after")
    def _bounds(self) -> "ResourceLimit":
        if self.floor is None and self.ceiling is None:
            raise ValueError("give a floor, a ceiling or both")
        if self.floor is not None and self.ceiling is not None and self.floor > self.ceiling:
            raise ValueError(f"floor {self.floor:g} is above ceiling {self.ceiling:g}")
        return self


class DeadlineRule(_Frozen):
    """A condition that must hold at some time no later than ``by``."""

    condition: str = Field(description='A ground condition in PDDL, e.g. "(delivered kit3)".')
    by: FiniteNumber = Field(ge=0)
    label: str | None = None


class TimeSettings(_Frozen):
    makespan: FiniteNumber | None = Field(default=None, gt=0,
                                   description="The latest time the last happening may fall at.")
    clock: str | None = Field(default=None,
                              description="A fluent that sequential plans advance as time.")
    tolerance: FiniteNumber = Field(default=0.001, gt=0,
                             description="Interfering happenings must be at least this far apart.")


class Limits(_Frozen):
    """Everything a limits file says; empty by default."""

    resource: tuple[ResourceLimit, ...] = ()
    deadline: tuple[DeadlineRule, ...] = ()
    time: TimeSettings = TimeSettings()

    @property
    def empty(self) -> bool:
        return not self.resource and not self.deadline and self.time == TimeSettings()


# -- reading the file -------------------------------------------------------------------

_TOML_AT = re.compile(r"\(at line (\d+), column (\d+)\)")


def _field_path(loc: tuple) -> str:
    out = ""
    for part in loc:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out


def _section_keys(loc: tuple) -> list[str]:
    """The keys allowed in the section an error's location points into."""
    names = [p for p in loc[:-1] if isinstance(p, str)]
    model = {"resource": ResourceLimit, "deadline": DeadlineRule,
             "time": TimeSettings}.get(names[-1] if names else "", Limits)
    return list(model.model_fields)


# The validation errors a limits file can raise, in our own words.
_OUR_WORDS = {
    "missing": "missing; this key is required here",
    "float_type": "expected a number",
    "float_parsing": "expected a number",
    "finite_number": "expected a finite number",
    "string_type": "expected text in quotes",
    "greater_than": "expected a number above {gt}",
    "greater_than_equal": "expected a number of {ge} or more",
    "model_type": "expected a table",
    "model_attributes_type": "expected a table",
    "dict_type": "expected a table",
}


def _message(e: dict) -> str:
    kind = e["type"]
    if kind == "tuple_type":
        name = next((p for p in reversed(e["loc"]) if isinstance(p, str)), "resource")
        return f"expected a list of tables, each written [[{name}]]"
    words = _OUR_WORDS.get(kind)
    if words is None:
        return e["msg"].removeprefix("Value error, ")
    return words.format(**{k: f"{v:g}" if isinstance(v, float) else v
                           for k, v in (e.get("ctx") or {}).items()})


def _validation_spots(file: str, err: ValidationError) -> list[Spot]:
    spots = []
    for e in err.errors():
        path = _field_path(tuple(e["loc"]))
        msg = _message(e)
        if e["type"] == "extra_forbidden":
            msg = f"unknown key; expected one of {', '.join(_section_keys(tuple(e['loc'])))}"
        elif e["type"] != "missing" and not isinstance(e.get("input"), (dict, list)):
            msg = f"{msg} (got {e['input']!r})"
        spots.append(Spot(file, None, None, msg, None, path or None))
    return spots


def parse_limits(text: str, filename: str = "<limits>") -> Limits:
    """Read limits from TOML or JSON text (JSON if it starts with ``{``)."""
    stripped = text.lstrip()
    try:
        if stripped.startswith("{"):
            data = json.loads(text)
        else:
            data = tomllib.loads(text)
    except json.JSONDecodeError as e:
        raise InputError(Spot(filename, e.lineno, e.colno, f"not valid JSON: {e.msg}",
                              text.splitlines()[e.lineno - 1] if text.splitlines() else None))
    except tomllib.TOMLDecodeError as e:
        m = _TOML_AT.search(str(e))
        line, col = (int(m.group(1)), int(m.group(2))) if m else (None, None)
        lines = text.splitlines()
        shown = lines[line - 1] if line and line <= len(lines) else None
        raise InputError(Spot(filename, line, col,
                              f"not valid TOML: {_TOML_AT.sub('', str(e)).strip()}", shown))
    if not isinstance(data, dict):
        raise InputError(Spot(filename, None, None,
                              f"a {type(data).__name__} at the top; expected a table with "
                              f"'resource', 'deadline' and 'time'"))
    try:
        return Limits.model_validate(data)
    except ValidationError as e:
        raise InputError(_validation_spots(filename, e)) from None


def load_limits(path: str | PathLike[str]) -> Limits:
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(Spot(name, None, None, "no such file")) from None
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(Spot(name, None, None, f"cannot read the file: {e}")) from None
    return parse_limits(text, name)


# -- checking the PDDL pieces against a task ---------------------------------------------

@functools.lru_cache(maxsize=4096)
def fluent_key(text: str) -> tuple:
    """The ground key of a fluent written as PDDL text: ``"(charge c7)"`` -> ``("charge", "c7")``."""
    from plansieve.critics.pddl import _parse
    key, _, _ = _parse(text, "fluent_spec", "<limits>", "fluent")
    return key


@functools.lru_cache(maxsize=4096)
def condition_of(text: str) -> Formula:
    """A ground condition written as PDDL text, as a model formula."""
    from plansieve.critics.pddl import _parse
    return _parse(text, "goal_spec", "<limits>", "condition")


def attach_limits(task: Task, limits: Limits, filename: str = "<limits>") -> Task:
    """``task`` carrying ``limits``, after checking every fluent and condition against it."""
    from plansieve.critics.model import FluentRef, Param
    from plansieve.critics.pddl import _Collector
    from plansieve.critics.semantics import ProblemChecker

    out = _Collector(filename)
    checker = ProblemChecker(task.domain, [Param(n, t) for n, t in task.problem.objects.items()])

    def fluent(text: str, field: str) -> None:
        parsed = out.parse(text, "fluent_spec", field)
        if parsed is None:
            return
        key = parsed[0]
        checker.body.fluent(FluentRef(key[0], key[1:], None), {})
        out.issues(field, checker._take(), text)

    for i, r in enumerate(limits.resource):
        fluent(r.fluent, f"resource[{i}].fluent")
    for i, d in enumerate(limits.deadline):
        f = out.parse(d.condition, "goal_spec", f"deadline[{i}].condition")
        if f is not None:
            out.issues(f"deadline[{i}].condition", checker.formula_issues(f), d.condition)
    if limits.time.clock is not None:
        fluent(limits.time.clock, "time.clock")
    try:
        out.raise_if_any()
    except InputError as e:
        # Positions inside a value are not positions in the file: say where in the value.
        spots = [s if s.line is None else Spot(
            s.file, None, None,
            f"{s.message.replace('the end of the file', 'the end of the value')} (at "
            f"character {s.column} of {(s.line_text or '').strip()!r})", None, s.field)
            for s in e.spots]
        raise type(e)(spots) from None
    return dataclasses.replace(task, limits=limits)
