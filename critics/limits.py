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
from os import PathLike
from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field, model_validator

from plansieve.critics.config_text import read_model, read_text_file
from plansieve.critics.errors import InputError, Spot
from plansieve.critics.model import Formula, Task


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


def parse_limits(text: str, filename: str = "<limits>") -> Limits:
    """Read limits from TOML or JSON text (JSON if it starts with ``{``)."""
    return read_model(Limits, text, filename)


def load_limits(path: str | PathLike[str]) -> Limits:
    return parse_limits(read_text_file(path), str(path))


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
