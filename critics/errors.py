"""The exception hierarchy: every error a user can cause is one of ours.

An input error points at a place (file, line, column), shows the line with a
caret under the column, and says what was expected there. Several problems in
one file are reported together rather than one per run.
"""

from __future__ import annotations

from dataclasses import dataclass


class PlansieveError(Exception):
    """Base of every error plansieve raises on purpose."""


@dataclass(frozen=True)
class Spot:
    """One problem at one place in one input."""

    file: str
    line: int | None
    column: int | None
    message: str
    line_text: str | None = None
    # For inputs without lines (JSON fields, Python-built objects): a dotted path.
    field: str | None = None

    def render(self) -> str:
        where = self.file
        if self.line is not None:
            where += f":{self.line}"
            if self.column is not None:
                where += f":{self.column}"
        if self.field:
            where += f" (at {self.field})"
        out = f"{where}: {self.message}"
        if self.line_text is not None and self.line is not None:
            shown = self.line_text.rstrip("\n").expandtabs(1)
            out += f"\n    {shown}"
            if self.column is not None:
                out += "\n    " + " " * (max(self.column, 1) - 1) + "^"
        return out


def spot_in_text(file: str, text: str | None, line: int | None, column: int | None,
                 message: str) -> Spot:
    """Build a Spot, copying the offending line out of ``text`` when we have it."""
    line_text = None
    if text is not None and line is not None:
        lines = text.splitlines()
        if 1 <= line <= len(lines):
            line_text = lines[line - 1]
    return Spot(file, line, column, message, line_text)


class InputError(PlansieveError):
    """Something the user gave us cannot be read. Carries one or more Spots."""

    def __init__(self, spots: list[Spot] | Spot) -> None:
        self.spots: list[Spot] = [spots] if isinstance(spots, Spot) else list(spots)
        super().__init__(self.render())

    def render(self) -> str:
        return "\n".join(s.render() for s in self.spots)

    @property
    def first(self) -> Spot:
        return self.spots[0]


class PddlSyntaxError(InputError):
    """The PDDL text does not follow the grammar."""


class ModelError(InputError):
    """The PDDL text parses but does not make sense (undeclared names, arity, types…)."""


class UnsupportedRequirement(ModelError):
    """The file asks for a PDDL requirement we do not implement."""


class PlanReadError(InputError):
    """A plan file or JSON step list cannot be read."""
