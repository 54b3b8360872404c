"""What a critic says about a plan: a verdict holding typed findings.

Findings are a discriminated union on ``code``: one model per kind, each with the
structured numbers and names feedback needs, plus a one-line ``message`` in plain
words. The codes are stable; renaming one is a breaking change.
"""

from __future__ import annotations

from typing import Annotated, Literal, NamedTuple, Union

from pydantic import BaseModel, ConfigDict, Field, model_validator


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
    # Plan time the finding is about, for timed plans and plans read on a clock fluent.
    time: float | None = None


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
    # For a durative action in a timed plan: the end whose condition failed.
    part: Literal["start", "end"] | None = None


class FluentUndefined(_Finding):
    code: Literal["fluent-undefined"] = "fluent-undefined"
    fluent: str
    context: Literal["precondition", "effect", "goal", "limit"]


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


# -- resource counter ---------------------------------------------------------------

class LimitCrossed(_Finding):
    """A resource went past its floor or ceiling; ``excess`` says by how much."""

    code: Literal["limit-crossed"] = "limit-crossed"
    resource: str  # the ground fluent, e.g. "(charge carrier-7)"
    label: str | None = None
    unit: str | None = None
    bound: Literal["floor", "ceiling"]
    limit: float
    value: float
    excess: float
    # In a timed plan: the steps whose durative actions are running at that time.
    concurrent_steps: list[int] = []
    # Actions whose effects move the resource back inside its bounds.
    hints: list[Hint] = []
    # A strict bound (PDDL3 ``<`` or ``>``): reaching the limit itself crosses it.
    strict: bool = False
    # When the resource goes further past the bound later in the plan: how far, and where.
    worst_excess: float | None = None
    worst_step: int | None = None
    worst_time: float | None = None


# -- deadline checker -----------------------------------------------------------------

class DeadlineMissed(_Finding):
    code: Literal["deadline-missed"] = "deadline-missed"
    condition: str
    deadline: float
    reached_at: float | None = None  # None: never reached within the plan
    late_by: float | None = None
    clock: str | None = None  # the clock fluent, when time is read on one


class Window(_Frozen):
    """An interval in which a condition holds, as set by timed initial literals."""

    opens: float | None = None  # None: from the start
    closes: float | None = None  # None: never closes


class WindowViolated(_Finding):
    """A condition that timed initial literals make true only in windows was needed outside them."""

    code: Literal["window-violated"] = "window-violated"
    action: str
    condition: str
    part: Literal["start", "end", "over-all", "step"]
    windows: list[Window] = []


class InvariantBroken(_Finding):
    """An ``over all`` condition failed inside a durative action's open interval."""

    code: Literal["invariant-broken"] = "invariant-broken"
    action: str
    condition: str
    interval_start: float
    interval_end: float
    broken_at: float
    # the step whose happening made it false, if one did (a timed literal otherwise)
    broken_by: str | None = None


class DurationOutOfBounds(_Finding):
    code: Literal["duration-out-of-bounds"] = "duration-out-of-bounds"
    action: str
    duration: float | None  # None: the step gives no duration
    minimum: float | None = None
    maximum: float | None = None
    constraint: str


class HappeningsTooClose(_Finding):
    """Two happenings that interfere are closer in time than the tolerance."""

    code: Literal["happenings-too-close"] = "happenings-too-close"
    other_step: int | None = None  # None when the other happening is a timed initial literal
    other_step_text: str
    gap: float
    tolerance: float
    shared: str  # the fact or fluent one changes and the other reads or changes


class ConstraintViolated(_Finding):
    """A trajectory constraint (PDDL3) does not hold over the plan."""

    code: Literal["constraint-violated"] = "constraint-violated"
    constraint: str
    operator: str  # always, sometime, within, at-most-once, ...


class MakespanOver(_Finding):
    code: Literal["makespan-over"] = "makespan-over"
    makespan: float
    limit: float
    excess: float


Finding = Annotated[
    Union[ActionUnknown, ArityMismatch, ObjectUnknown, ArgumentType, PreconditionFalse,
          FluentUndefined, DivisionByZero, EffectConflict, GoalUnmet, LimitCrossed,
          DeadlineMissed, WindowViolated, InvariantBroken, DurationOutOfBounds,
          HappeningsTooClose, ConstraintViolated, MakespanOver],
    Field(discriminator="code"),
]


class ProfilePoint(NamedTuple):
    """A resource's value after a step (sequential plans) or at a time (timed plans)."""

    step: int | None  # None for the initial value and for timed literals
    time: float | None
    value: float


class ResourceProfile(_Frozen):
    """How one resource moved through the plan.

    The points are kept as three columns of equal length (cheap to build and to
    store for long plans); ``points`` reads them as rows.
    """

    resource: str
    label: str | None = None
    unit: str | None = None
    floor: float | None = None
    ceiling: float | None = None
    steps: list[int | None] = Field(
        description="Per point, the step after which it holds; null for the initial value "
                    "and timed literals.")
    times: list[float | None] = Field(
        description="Per point, the plan time (timed plans and clocks); null otherwise.")
    values: list[float]
    initial: float
    peak: float
    low: float
    final: float

    @model_validator(mode="after")
    def _columns(self) -> "ResourceProfile":
        if not len(self.steps) == len(self.times) == len(self.values):
            raise ValueError("steps, times and values must have one entry per point")
        return self

    @property
    def points(self) -> list[ProfilePoint]:
        return [ProfilePoint(*row) for row in zip(self.steps, self.times, self.values)]


class TimelineEntry(_Frozen):
    """One deadline or limit on time and how the plan fared against it."""

    what: str  # the condition, or "makespan"
    deadline: float
    reached_at: float | None = None
    met: bool


class Verdict(_Frozen):
    """One critic's judgement of one plan."""

    critic: str
    version: str
    sound: bool = Field(description="True when a pass can be trusted: the critic never accepts a bad plan.")
    passed: bool
    findings: list[Finding] = []
    steps_checked: int = 0
    seconds: float = 0.0
    # Filled by the resource counter and the deadline checker; empty for other critics.
    profiles: list[ResourceProfile] = []
    timeline: list[TimelineEntry] = []

    def codes(self) -> list[str]:
        return [f.code for f in self.findings]
