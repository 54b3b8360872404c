"""A plan as the critics see it: an ordered list of steps, each an action name and arguments.

Time and duration are kept when the plan carries them (``0.5: (move a b) [2]``)
for the deadline checker; the plan simulator ignores them and runs steps in order.
"""

from __future__ import annotations

from dataclasses import dataclass, field


def _fmt_number(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(float(x))


@dataclass(frozen=True, slots=True)
class PlanStep:
    action: str
    args: tuple[str, ...] = ()
    time: float | None = None
    duration: float | None = None
    # Where the step was written (1-based line of its source), if it came from text.
    line: int | None = field(default=None, compare=False)

    def call(self) -> str:
        """The step as a PDDL call: ``(load pkg1 van2)``."""
        return "(" + " ".join((self.action, *self.args)) + ")"

    def to_line(self) -> str:
        """The step in plan-file form, with time and duration when present."""
        out = self.call()
        if self.time is not None:
            out = f"{_fmt_number(self.time)}: {out}"
        if self.duration is not None:
            out = f"{out} [{_fmt_number(self.duration)}]"
        return out


@dataclass(frozen=True, slots=True)
class Plan:
    steps: tuple[PlanStep, ...] = ()
    source: str | None = field(default=None, compare=False)

    def __len__(self) -> int:
        return len(self.steps)

    def __iter__(self):
        return iter(self.steps)

    @property
    def is_timed(self) -> bool:
        return any(s.time is not None for s in self.steps)

    def to_text(self) -> str:
        """The plan in plan-file form, one step a line."""
        return "".join(s.to_line() + "\n" for s in self.steps)

    @classmethod
    def of(cls, *calls: str | tuple[str, ...]) -> "Plan":
        """Build a plan from Python: ``Plan.of("(pick a)", ("drop", "a"))``."""
        steps = []
        for c in calls:
            if isinstance(c, str):
                words = c.strip().strip("()").split()
                steps.append(PlanStep(words[0].lower(), tuple(w.lower() for w in words[1:])))
            else:
                steps.append(PlanStep(c[0].lower(), tuple(a.lower() for a in c[1:])))
        return cls(tuple(steps))
