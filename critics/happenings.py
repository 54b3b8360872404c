"""A plan as a list of happenings: what changes the state, when, in which order.

Critics that follow a plan through time (the plan simulator on timed plans, the
resource counter, the deadline checker) share this one schedule, so they agree
on the order in which starts, ends, instantaneous steps and timed initial
literals are applied.

Untimed (sequential) plans keep the written order: an instantaneous step is one
happening, a durative action read sequentially is its start half then its end
half (``over all`` conditions folded into the end half, the only state between
them), and timed initial literals are left out (a sequential plan has no times to
place them at).

In a timed plan a durative step is a start happening (``at start`` conditions and
effects) and an end happening (``at end`` conditions and effects); its ``over
all`` conditions hold over the open interval between them and are checked by
the deadline checker, not read at either end (PDDL 2.1, Fox & Long 2003, sec. 5).

Timed plans are ordered by time. Under PDDL 2.1 (Fox & Long 2003, sec. 5 and 8)
the events sharing one time form a single happening: their conditions are read
in the state before it and their effects land together, and a valid plan may
only put events together that do not interfere (the mutex rule). For
non-interfering events every order gives the same states, so any fixed order is
faithful; interference is reported by the deadline checker. We pick, at equal
times:

1. ends of durative actions (what an action holds is released first),
2. timed initial literals (PDDL 2.2, Edelkamp & Hoffmann 2004: exogenous events
   at fixed times, treated like actions in the mutex rule),
3. instantaneous steps,
4. starts of durative actions,
5. ends of zero-duration actions, which must follow their own start;

and written order within each group (timed literals in the order of the problem).

A step that names no real action (unknown action, bad arguments) becomes a
problem, located at its step number, and is left out. In a timed plan a durative
step without a duration, or with a negative one, cannot be placed: it becomes a
``duration-out-of-bounds`` problem and is left out too.

Durative actions that read ``?duration`` (in conditions or effects) get the
step's duration put in here, so the ground actions in happenings are ready to
apply with :func:`plansieve.critics.state.apply`.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass, field, replace
from fractions import Fraction

from plansieve.critics import render
from plansieve.critics.errors import PlanReadError, Spot
from plansieve.critics.grounding import Calc, Conditional, GroundAction, exact
from plansieve.critics.model import (
    Action, Add, And, Assign, Compare, Delete, DurationRef, Not, Or, Timed, TimedLiteral,
)
from plansieve.critics.plan import Plan, PlanStep
from plansieve.critics.temporal import duration_text, parts_of
from plansieve.critics.verdict import DurationOutOfBounds
from plansieve.critics.world import World

Time = int | Fraction

# Order of parts at one time; see the module docstring.
_RANK = {"end": 0, "til": 1, "step": 2, "start": 3}
_ZERO_END_RANK = 4


@dataclass(frozen=True, slots=True)
class Happening:
    """One thing applied to the state: an instantaneous step, one end of a durative
    step, or a timed initial literal."""

    # exact plan time; None for untimed (sequential) plans. Happenings at equal times
    # share one number object, so ``a.time is b.time`` groups them.
    time: Time | None
    step: int | None  # 1-based plan step; None for a timed initial literal
    part: str  # "step", "start", "end" or "til"
    action: GroundAction


@dataclass
class Schedule:
    happenings: list[Happening] = field(default_factory=list)  # in the order they are applied
    # findings for steps that could not be resolved or placed, located with step numbers
    problems: list = field(default_factory=list)
    # step -> (start time, end time) for durative steps of a timed plan
    intervals: dict[int, tuple[Time, Time]] = field(default_factory=dict)
    # a timed plan's end: the time of its last step happening (0 without any). Timed
    # literals stamped later are listed too, but lie outside the plan: the plan
    # simulator and the deadline checker stop at ``end``.
    end: Time | None = None


def schedule(world: World, plan: Plan) -> Schedule:
    """The happenings of ``plan`` in the order they are applied (see the module docstring).

    Raises PlanReadError for a plan that gives some steps a start time but not all,
    or a time that is negative or not finite (the plan readers never make one; a
    plan built in Python can).
    """
    if plan.is_timed:
        return _timed(world, plan)
    return _sequential(world, plan)


def runs_timed(plan: Plan) -> bool:
    """True when every step has a usable start time (finite, not negative)."""
    return bool(plan.steps) and all(
        s.time is not None and usable(s.time) for s in plan.steps)


def usable(x) -> bool:
    """Whether a plan time or duration can be used: a finite number, not negative."""
    return x >= 0 and x - x == 0  # finite and not negative (nan - nan and inf - inf are nan)


def _sequential(world: World, plan: Plan) -> Schedule:
    out = Schedule()
    binder = binder_of(world)
    happenings = out.happenings
    for number, step in enumerate(plan.steps, 1):
        resolved = world.resolve(step)
        if resolved.__class__ is list:
            out.problems.extend(world.located(resolved, number, step))
            continue
        if len(resolved) == 1:
            happenings.append(Happening(None, number, "step", resolved[0]))
            continue
        start, end = resolved
        d = exact_time(step.duration) if step.duration is not None and usable(
            step.duration) else None
        if binder.needs(start) or binder.needs(end):
            if d is None:
                out.problems.append(missing_duration(world, number, step, reads=True))
                continue
            start, end = binder.bind(start, d), binder.bind(end, d)
        happenings.append(Happening(None, number, "start", start))
        happenings.append(Happening(None, number, "end", end))
    return out


def _timed(world: World, plan: Plan) -> Schedule:
    out = Schedule()
    binder = binder_of(world)
    parts = parts_of(world)
    keyed: list[tuple] = []
    for number, step in enumerate(plan.steps, 1):
        if step.time is None or not usable(step.time):
            why = ("has no start time, but other steps have one; give every step a time or none"
                   if step.time is None else
                   f"has the start time {step.time!r}; times must be finite and not negative")
            raise PlanReadError(Spot(plan.source or "<plan>", step.line, None,
                                     f"step {number} {step.call()} {why}",
                                     field=f"steps[{number - 1}].time"))
        resolved = world.resolve(step)
        if resolved.__class__ is list:
            when = float(step.time)
            out.problems.extend(f.model_copy(update={"time": when})
                                for f in world.located(resolved, number, step))
            continue
        t = exact_time(step.time)
        if len(resolved) == 1:
            keyed.append((float(t), t, _RANK["step"], number, "step", resolved[0]))
            continue
        if step.duration is None or not usable(step.duration):
            out.problems.append(missing_duration(world, number, step, reads=False))
            continue
        d = exact_time(step.duration)
        # In time, ``over all`` conditions belong to the open interval, not to the end:
        # the end happening reads only its ``at end`` conditions.
        split = parts.of(step.action, step.args, resolved)
        start, end = split.start, split.end
        if binder.needs(start) or binder.needs(end):
            start, end = binder.bind(start, d), binder.bind(end, d)
        te = t + d
        if type(te) is Fraction and te.denominator == 1:
            te = te.numerator
        out.intervals[number] = (t, te)
        keyed.append((float(t), t, _RANK["start"], number, "start", start))
        keyed.append((float(te), te, _RANK["end"] if d else _ZERO_END_RANK, number, "end", end))
    for i, (t, ga) in enumerate(timed_literals(world)):
        keyed.append((float(t), t, _RANK["til"], i, "til", ga))
    # The float first: comparing floats is cheap, float() never reverses an order, and
    # equal floats fall through to the exact times; (rank, number) is never tied.
    keyed.sort()
    # Equal times share one number object, so consumers can group happenings by ``is``.
    happenings = out.happenings
    last, last_f = None, None
    for f, t, _, n, part, ga in keyed:
        if f == last_f and t is not last and t == last:
            t = last
        last, last_f = t, f
        happenings.append(Happening(t, None if part == "til" else n, part, ga))
    out.end = next((h.time for h in reversed(happenings) if h.step is not None), 0)
    return out


_BINDERS: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def binder_of(world: World) -> "DurationBinder":
    """The duration binder of ``world``'s ground actions, kept as long as the world lives,
    so checking many plans against one task binds each (action, duration) pair once."""
    got = _BINDERS.get(world)
    if got is None:
        got = _BINDERS[world] = DurationBinder()
    return got


def missing_duration(world: World, number: int, step: PlanStep, *, reads: bool):
    """The finding for a durative step that cannot be placed for want of a usable duration."""
    da = world.task.domain.durative_actions[step.action]
    text = step.call()
    shown = render.number(step.duration) if step.duration is not None else None
    bounds = " ".join(duration_text(c) for c in da.duration) or "(none)"
    if step.duration is not None:
        message = f"{text} is given the duration {shown}; it must be finite and not negative"
    elif reads:
        message = f"{text} uses ?duration, but the step gives no duration"
    else:
        message = f"{text} is a durative action, but the step gives no duration"
    return DurationOutOfBounds(step=number, step_text=text, action=step.action,
                               duration=None if step.duration is None else float(step.duration),
                               constraint=bounds, message=message,
                               time=None if step.time is None else float(step.time))


_EXACT: dict = {}


def exact_time(x) -> Time:
    """A time or duration as an exact number, an int when it is whole.

    Plan times are written in decimal, so ``2.01`` means 201/100 (as
    :func:`plansieve.critics.grounding.exact` reads numbers). Memoised: plans
    repeat their times and durations, and converting is the costly part.
    """
    got = _EXACT.get(x)
    if got is None:
        if type(x) is int or type(x) is Fraction:
            got = x.numerator if type(x) is Fraction and x.denominator == 1 else x
        else:
            got = _decimal(x)
        if len(_EXACT) >= 65536:
            _EXACT.clear()
        _EXACT[x] = got
    return got


def _decimal(x) -> Time:
    f = float(x)
    if f.is_integer():
        return int(f)
    text = repr(f)
    if "e" in text:
        v = exact(f)
    else:
        whole, _, digits = text.partition(".")
        v = Fraction(int(whole + digits), 10 ** len(digits))
    return v.numerator if v.denominator == 1 else v


def timed_literals(world: World) -> list[tuple[Time, GroundAction]]:
    """The problem's timed initial literals as (exact time, ground action), in written order."""
    out = []
    for til in world.task.problem.timed_literals:
        out.append((exact_time(til.time), til_action(til)))
    return out


def til_action(til: TimedLiteral) -> GroundAction:
    """A timed initial literal as a ground action with no condition and its one effect."""
    e = til.effect
    adds: frozenset = frozenset()
    dels: frozenset = frozenset()
    numeric: tuple = ()
    if isinstance(e, Add):
        adds = frozenset({e.atom.key})
    elif isinstance(e, Delete):
        dels = frozenset({e.atom.key})
    elif isinstance(e, Assign):
        numeric = (("assign", (e.fluent.function, *e.fluent.args), exact(e.value.value)),)
    schema = Action(f"at {render.number(til.time)}", (), None, (e,), til.loc)
    return GroundAction("timed-literal", (), schema, frozenset(), frozenset(), (), adds, dels,
                        numeric, (), not numeric)


# ---------------------------------------------------------------------------
# ?duration


class DurationBinder:
    """Puts a step's duration in place of ``?duration`` in ground actions.

    Memoised per ground action (by identity) and per (action, duration), so a
    plan with many steps of one kind binds each distinct pair once.
    """

    __slots__ = ("_needs", "_bound")

    def __init__(self) -> None:
        self._needs: dict[GroundAction, bool] = {}
        self._bound: dict[tuple, GroundAction] = {}

    def needs(self, ga: GroundAction) -> bool:
        """Whether ``ga`` reads ``?duration`` anywhere."""
        got = self._needs.get(ga)
        if got is None:
            got = self._needs[ga] = not ga.plain and (
                any(_mentions(f) for f in ga.pre_other)
                or any(_mentions(rhs) for _, _, rhs in ga.numeric)
                or any(_mentions(c.condition) or any(_mentions(r) for _, _, r in c.numeric)
                       for c in ga.conditional))
        return got

    def bind(self, ga: GroundAction, d: Time) -> GroundAction:
        if not self.needs(ga):
            return ga
        key = (ga, d)  # by identity: ground actions compare by identity
        got = self._bound.get(key)
        if got is None:
            got = self._bound[key] = replace(
                ga,
                pre_other=tuple(put_duration(f, d) for f in ga.pre_other),
                numeric=tuple((op, k, put_duration(rhs, d)) for op, k, rhs in ga.numeric),
                conditional=tuple(Conditional(put_duration(c.condition, d), c.adds, c.dels,
                                              tuple((op, k, put_duration(r, d)) for op, k, r in c.numeric))
                                  for c in ga.conditional))
        return got


def _mentions(x) -> bool:
    t = type(x)
    if t is DurationRef:
        return True
    if t is Calc:
        return any(_mentions(a) for a in x.args)
    if t is Compare:
        return _mentions(x.left) or _mentions(x.right)
    if t is Not or t is Timed:
        return _mentions(x.body)
    if t is And or t is Or:
        return any(_mentions(p) for p in x.parts)
    return False


def put_duration(x, d: Time):
    """A ground formula or expression ``x`` with ``?duration`` replaced by ``d`` (ground formulas and expressions)."""
    t = type(x)
    if t is DurationRef:
        return d
    if t is Calc:
        return Calc(x.op, tuple(put_duration(a, d) for a in x.args))
    if t is Compare:
        return Compare(x.op, put_duration(x.left, d), put_duration(x.right, d))
    if t is Not:
        return Not(put_duration(x.body, d))
    if t is Timed:
        return Timed(x.when, put_duration(x.body, d))
    if t is And:
        return And(tuple(put_duration(p, d) for p in x.parts))
    if t is Or:
        return Or(tuple(put_duration(p, d) for p in x.parts))
    return x
