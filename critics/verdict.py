"""What a critic says about a plan: a verdict holding typed findings.

Findings are a discriminated union on ``code``: one model per kind, each with the
structured numbers and names feedback needs, plus a one-line ``message`` in plain
words. The codes are stable; renaming one is a breaking change.
"""

from __future__ import annotations

from typing import Annotated, Literal, Union

from pydantic import BaseModel, ConfigDict, Field


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


class Hint(_Frozen):
    """An action schema whose effect could make a failed condition hold.

    ``args`` are the schema's parameters, bound where the condition fixes them and
    left as ``?name`` where it does not: ``unstack ?x b`` can make ``(clear b)`` true.
    """

    action: str
    args: list[str]
    effect: str

    def call(self) -> str:
        return "(" + " ".join([self.action, *self.args]) + ")"


class _Finding(_Frozen):
    message: str
    # 1-based step number and the step as written; None for findings about the end state.
    step: int | None = None
    step_text: str | None = None


class ActionUnknown(_Finding):
    code: Literal["action-unknown"] = "action-unknown"
    action: str
    similar: list[str] = []


class ArityMismatch(_Finding):
    code: Literal["arity-mismatch"] = "arity-mismatch"
    action: str
    expected: int
    given: int


class ObjectUnknown(_Finding):
    code: Literal["object-unknown"] = "object-unknown"
    object: str
    position: int  # 1-based argument position


class ArgumentType(_Finding):
    code: Literal["argument-type"] = "argument-type"
    object: str
    position: int
    parameter: str
    expected: list[str]
    actual: list[str]


class PreconditionFalse(_Finding):
    code: Literal["precondition-false"] = "precondition-false"
    action: str
    condition: str  # the ground condition that is false, in PDDL
    # For numeric comparisons: the values of both sides in the state before the step.
    left_value: float | None = None
    right_value: float | None = None
    hints: list[Hint] = []


class FluentUndefined(_Finding):
    code: Literal["fluent-undefined"] = "fluent-undefined"
    fluent: str
    context: Literal["precondition", "effect", "goal"]


class DivisionByZero(_Finding):
    code: Literal["division-by-zero"] = "division-by-zero"
    expression: str
    context: Literal["precondition", "effect", "goal"]


class EffectConflict(_Finding):
    code: Literal["effect-conflict"] = "effect-conflict"
    fluent: str
    effects: list[str]  # the operations that meet on the fluent, in the order written


class GoalUnmet(_Finding):
    code: Literal["goal-unmet"] = "goal-unmet"
    condition: str
    left_value: float | None = None
    right_value: float | None = None
    hints: list[Hint] = []


Finding = Annotated[
    Union[ActionUnknown, ArityMismatch, ObjectUnknown, ArgumentType, PreconditionFalse,
          FluentUndefined, DivisionByZero, EffectConflict, GoalUnmet],
    Field(discriminator="code"),
]


class Verdict(_Frozen):
    """One critic's judgement of one plan."""

    critic: str
    version: str
    sound: bool = Field(description="True when a pass can be trusted: the critic never accepts a bad plan.")
    passed: bool
    findings: list[Finding] = []
    steps_checked: int = 0
    seconds: float = 0.0

    def codes(self) -> list[str]:
        return [f.code for f in self.findings]
