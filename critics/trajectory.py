"""PDDL3 trajectory constraints (Gerevini & Long 2005), judged over a plan's states.

A plan's trajectory is its sequence of timed states ``(S0, 0), (S1, t1), ...,
(Sn, tn)``: the initial state at time 0, then the state after each time point
of a timed plan (every happening at one time applied), or after each step of a
sequential plan. A sequential plan's time stamps are its step numbers (as the
PDDL3 paper reads non-temporal plans), or the value of a clock fluent when the
limits file names one. Each constraint is a monitor that sees the states in
order and decides at the end; the definitions, from the paper (written from
memory), with ``i``, ``j`` ranging over the trajectory:

* ``(at end φ)``: φ holds in Sn.
* ``(always φ)``: φ holds in every Si.
* ``(sometime φ)``: φ holds in some Si.
* ``(within t φ)``: φ holds in some Si with ti <= t. Reported as a deadline.
* ``(at-most-once φ)``: φ holds in at most one unbroken run of states.
* ``(sometime-after φ ψ)``: every Si where φ holds has a j >= i where ψ holds.
* ``(sometime-before φ ψ)``: every Si where φ holds has a j < i where ψ holds.
* ``(always-within t φ ψ)``: every Si where φ holds has a j >= i where ψ holds
  and tj - ti <= t.
* ``(hold-during t1 t2 φ)``: φ holds in every state in effect at some time in
  [t1, t2). The paper quantifies only over states stamped inside the interval;
  we also take the state already in effect at t1 (the last stamped at or before
  t1), since it holds there too. This is stricter, never looser.
* ``(hold-after t φ)``: φ holds in every state in effect after t: those stamped
  after t and, by the same reasoning, the last one stamped at or before t.

Preferences are soft and are not judged. ``always`` parts that compare one
fluent with a number are bounds for the resource counter and are left to it;
everything else here is the deadline checker's.

A formula that cannot be read in a state (a fluent without a value, a division
by zero) makes its constraint unjudgeable, which is reported as a violation at
that state: a sound critic does not pass what it cannot judge.
"""

from __future__ import annotations

from dataclasses import dataclass

from plansieve.critics import render
from plansieve.critics.grounding import Universe, conjuncts, exact, ground_formula
from plansieve.critics.model import And, Compare, Forall, Preference, Trajectory
from plansieve.critics.state import DivisionByZero, Undefined, holds, value
from plansieve.critics.verdict import ConstraintViolated, DeadlineMissed


@dataclass(frozen=True, slots=True)
class Where:
    """A state of the trajectory: its time and the step that led to it (None for S0)."""

    time: object  # exact number
    step: int | None = None
    step_text: str | None = None


def is_resource_bound(c) -> bool:
    """A ground comparison of one fluent with a number: the resource counter's kind of
    ``always`` part, by the counter's own rule, so each bound has exactly one judge."""
    from plansieve.critics.resources import bound_of
    return type(c) is Compare and bound_of(c) is not None


@dataclass(frozen=True, slots=True)
class Ground:
    """A ground trajectory constraint: ``op``, its ground formulas and exact times."""

    op: str
    formulas: tuple
    times: tuple
    text: str  # as PDDL, ground


def trajectories(constraints, universe: Universe, sub: dict | None = None):
    """Each trajectory constraint of a ``:constraints`` formula, with the bindings of the
    ``forall``s around it. A preference is soft (PDDL3): it and what it wraps are skipped."""
    f, sub = constraints, sub or {}
    if isinstance(f, And):
        for p in f.parts:
            yield from trajectories(p, universe, sub)
    elif isinstance(f, Forall):
        for b in universe.bindings(f.params):
            yield from trajectories(f.body, universe, {**sub, **b})
    elif isinstance(f, Trajectory):
        yield f, sub


def collect(constraints, universe: Universe) -> list[Ground]:
    """The hard, non-resource trajectory constraints in a ``:constraints`` formula, ground."""
    out: list[Ground] = []
    for f, sub in trajectories(constraints, universe):
        if any(_has_preference(g) for g in f.formulas):
            continue  # a soft part inside: the whole constraint is soft
        formulas = tuple(ground_formula(g, sub, universe) for g in f.formulas)
        if f.op == "always":
            rest = [c for c in conjuncts(formulas[0]) if not is_resource_bound(c)]
            if not rest:
                continue
            formulas = (rest[0] if len(rest) == 1 else And(tuple(rest)),)
        times = tuple(exact(t) for t in f.times)
        shown = Trajectory(f.op, formulas, f.times)
        out.append(Ground(f.op, formulas, times, render.formula(shown)))
    return out


def _has_preference(f) -> bool:
    if isinstance(f, Preference):
        return True
    for name in ("body", "condition", "then"):
        inner = getattr(f, name, None)
        if inner is not None and not isinstance(inner, (str, tuple)) and _has_preference(inner):
            return True
    return any(_has_preference(p) for p in getattr(f, "parts", ()))


# ---------------------------------------------------------------------------
# Monitors


class Unjudgeable(Exception):
    def __init__(self, why: str) -> None:
        super().__init__(why)
        self.why = why


def _holds(f, atoms, fluents) -> bool:
    try:
        return holds(f, atoms, fluents)
    except Undefined as e:
        raise Unjudgeable(f"{render.ground_atom(e.key)} has no value") from None
    except DivisionByZero as e:
        raise Unjudgeable(f"{render.expr(e.calc)} divides by zero") from None


def _t(x) -> str:
    return render.number(x)


class Monitor:
    """Sees the trajectory's states in order; ``finish`` returns its findings."""

    def __init__(self, c: Ground) -> None:
        self.c = c
        self.findings: list = []
        self.done = False  # decided (violated or unjudgeable): later states are not read

    def see(self, w: Where, atoms, fluents) -> None:
        if self.done:
            return
        try:
            self._see(w, atoms, fluents)
        except Unjudgeable as e:
            self._violated(w, f"cannot be judged at time {_t(w.time)}: {e.why}")

    def finish(self, last: Where, atoms, fluents) -> list:
        if not self.done:
            try:
                self._finish(last, atoms, fluents)
            except Unjudgeable as e:
                self._violated(last, f"cannot be judged at the end: {e.why}")
        return self.findings

    def _see(self, w: Where, atoms, fluents) -> None:
        pass

    def _finish(self, last: Where, atoms, fluents) -> None:
        pass

    def _violated(self, w: Where | None, why: str) -> None:
        self.done = True
        self.findings.append(ConstraintViolated(
            constraint=self.c.text, operator=self.c.op,
            step=w.step if w else None, step_text=w.step_text if w else None,
            time=float(w.time) if w else None,
            message=f"{self.c.text} is broken: {why}"))


def _after(w: Where) -> str:
    """``at time 7 (after step 3, (drive t1 a b))`` / ``at the start``."""
    if w.step is None:
        return f"at time {_t(w.time)} (the initial state)" if w.time else "in the initial state"
    return f"at time {_t(w.time)} (after step {w.step}, {w.step_text})"


class AtEnd(Monitor):
    def _finish(self, last, atoms, fluents):
        if not _holds(self.c.formulas[0], atoms, fluents):
            self._violated(last, f"{render.formula(self.c.formulas[0])} does not hold "
                                 f"when the plan ends (time {_t(last.time)})")


class Always(Monitor):
    def _see(self, w, atoms, fluents):
        if not _holds(self.c.formulas[0], atoms, fluents):
            self._violated(w, f"{render.formula(self.c.formulas[0])} is false {_after(w)}")


class Sometime(Monitor):
    def _see(self, w, atoms, fluents):
        if _holds(self.c.formulas[0], atoms, fluents):
            self.done = True  # satisfied

    def _finish(self, last, atoms, fluents):
        self._violated(None, f"{render.formula(self.c.formulas[0])} never holds in the plan")


class AtMostOnce(Monitor):
    def __init__(self, c):
        super().__init__(c)
        self.phase = 0  # 0: not yet true; 1: in its first run; 2: that run has ended
        self.first: Where | None = None

    def _see(self, w, atoms, fluents):
        now = _holds(self.c.formulas[0], atoms, fluents)
        if now and self.phase == 0:
            self.phase, self.first = 1, w
        elif not now and self.phase == 1:
            self.phase = 2
        elif now and self.phase == 2:
            self._violated(w, f"{render.formula(self.c.formulas[0])} becomes true again "
                              f"{_after(w)}, after holding from time {_t(self.first.time)}")


class SometimeAfter(Monitor):
    def __init__(self, c):
        super().__init__(c)
        self.waiting: Where | None = None  # earliest φ-state not yet followed by ψ

    def _see(self, w, atoms, fluents):
        phi, psi = self.c.formulas
        if _holds(psi, atoms, fluents):
            self.waiting = None
        elif self.waiting is None and _holds(phi, atoms, fluents):
            self.waiting = w

    def _finish(self, last, atoms, fluents):
        if self.waiting is not None:
            phi, psi = self.c.formulas
            self._violated(self.waiting, f"{render.formula(phi)} holds {_after(self.waiting)}, "
                                         f"but {render.formula(psi)} never holds from then on")


class SometimeBefore(Monitor):
    def __init__(self, c):
        super().__init__(c)
        self.seen = False  # ψ has held in an earlier state

    def _see(self, w, atoms, fluents):
        phi, psi = self.c.formulas
        if not self.seen and _holds(phi, atoms, fluents):
            self._violated(w, f"{render.formula(phi)} holds {_after(w)}, but "
                              f"{render.formula(psi)} has not held before")
            return
        if _holds(psi, atoms, fluents):
            self.seen = True
            self.done = True  # every later φ-state has this ψ-state before it


class AlwaysWithin(Monitor):
    def __init__(self, c):
        super().__init__(c)
        self.waiting: Where | None = None  # earliest φ-state still waiting for ψ

    def _see(self, w, atoms, fluents):
        (limit,), (phi, psi) = self.c.times, self.c.formulas
        if self.waiting is not None and w.time - self.waiting.time > limit:
            self._late(w)
            return
        if _holds(psi, atoms, fluents):
            self.waiting = None
        elif self.waiting is None and _holds(phi, atoms, fluents):
            self.waiting = w

    def _late(self, w: Where | None) -> None:
        (limit,), (phi, psi) = self.c.times, self.c.formulas
        by = self.waiting.time + limit
        self._violated(self.waiting, f"{render.formula(phi)} holds {_after(self.waiting)}, "
                                     f"but {render.formula(psi)} does not follow by time "
                                     f"{_t(by)}")

    def _finish(self, last, atoms, fluents):
        if self.waiting is not None:
            self._late(last)


class HoldDuring(Monitor):
    """Also used for hold-after (an interval without an end)."""

    def __init__(self, c, start, end):
        super().__init__(c)
        self.start, self.end = start, end  # end None: no end
        self.candidate: tuple | None = None  # (where, holds) of the last state at or before start
        self.opened = False

    def _check_candidate(self):
        w, ok = self.candidate
        self.opened = True
        if not ok:
            self._violated(w, f"{render.formula(self.c.formulas[0])} is false at time "
                              f"{_t(self.start)} ({self._state_text(w)})")

    @staticmethod
    def _state_text(w: Where) -> str:
        if w.step is None:
            return "the initial state"
        return f"the state after step {w.step}, {w.step_text}, at time {_t(w.time)}"

    def _see(self, w, atoms, fluents):
        if self.end is not None and self.end <= self.start:
            self.done = True  # an empty interval asks nothing
            return
        if w.time <= self.start:
            self.candidate = (w, _holds(self.c.formulas[0], atoms, fluents))
            return
        if not self.opened and self.candidate is not None:
            self._check_candidate()
            if self.done:
                return
        if self.end is not None and w.time >= self.end:
            self.done = True
            return
        if not _holds(self.c.formulas[0], atoms, fluents):
            self._violated(w, f"{render.formula(self.c.formulas[0])} is false {_after(w)}")

    def _finish(self, last, atoms, fluents):
        if not self.opened and self.candidate is not None and not (
                self.end is not None and self.end <= self.start):
            self._check_candidate()


class Within(Monitor):
    """A deadline: φ must hold in some state stamped at or before the limit.

    Also used for the limits file's deadline rules. ``reached`` is the time φ
    first holds, even after the deadline, so a finding can say how late it is.
    """

    def __init__(self, c: Ground, label: str | None = None, clock: str | None = None):
        super().__init__(c)
        self.limit = c.times[0]
        self.reached: Where | None = None
        self.label = label
        self.clock = clock

    def _see(self, w, atoms, fluents):
        if _holds(self.c.formulas[0], atoms, fluents):
            self.reached = w
            self.done = True

    def _finish(self, last, atoms, fluents):
        pass

    @property
    def met(self) -> bool:
        return self.reached is not None and self.reached.time <= self.limit

    def finish(self, last: Where, atoms, fluents) -> list:
        if self.findings:  # unjudgeable
            return self.findings
        if self.met:
            return []
        cond = render.formula(self.c.formulas[0])
        name = f"{self.label}: {cond}" if self.label else cond
        where = f" on the clock {self.clock}" if self.clock else ""
        if self.reached is None:
            msg = (f"{name} never holds in the plan (which ends at {_t(last.time)}); "
                   f"its deadline is {_t(self.limit)}{where}")
            return [DeadlineMissed(condition=cond, deadline=float(self.limit), clock=self.clock,
                                   time=float(last.time), message=msg)]
        w = self.reached
        late = w.time - self.limit
        msg = (f"{name} holds first at {_t(w.time)}, {_t(late)} after its deadline "
               f"{_t(self.limit)}{where}")
        return [DeadlineMissed(condition=cond, deadline=float(self.limit),
                               reached_at=float(w.time), late_by=float(late), clock=self.clock,
                               step=w.step, step_text=w.step_text, time=float(w.time),
                               message=msg)]


def monitor(c: Ground) -> Monitor:
    op = c.op
    if op == "at-end":
        return AtEnd(c)
    if op == "always":
        return Always(c)
    if op == "sometime":
        return Sometime(c)
    if op == "within":
        return Within(c)
    if op == "at-most-once":
        return AtMostOnce(c)
    if op == "sometime-after":
        return SometimeAfter(c)
    if op == "sometime-before":
        return SometimeBefore(c)
    if op == "always-within":
        return AlwaysWithin(c)
    if op == "hold-during":
        return HoldDuring(c, c.times[0], c.times[1])
    if op == "hold-after":
        return HoldDuring(c, c.times[0], None)
    raise ValueError(f"unknown trajectory operator {op!r}")


def deadline(condition, by, text: str, label: str | None = None) -> Within:
    """A limits-file deadline rule as a monitor: ``condition`` (ground) must hold by ``by``."""
    return Within(Ground("within", (condition,), (exact(by),), text), label)

