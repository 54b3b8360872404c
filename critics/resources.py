"""The resource counter critic: follow numeric fluents with a floor or a ceiling through a plan.

A resource is one ground numeric fluent with bounds. Bounds come from two places:

* the limits file's ``[[resource]]`` entries (floor, ceiling, unit, label);
* PDDL3 trajectory constraints (Gerevini & Long 2005) in the domain's and the
  problem's ``:constraints`` of the shape ``(always (<= (f ...) c))`` — any of
  ``<= < >= >`` and ``=``, the number on either side (a constant expression is
  folded), several of them joined by ``and`` under one ``always``, and
  ``forall`` over objects (ground here, outside or inside the ``always``).
  A strict bound (``<``, ``>``) is kept as strict: reaching the limit itself
  crosses it, with an excess of 0. ``=`` is a floor and a ceiling at once.
  Preferences are soft and skipped; any other constraint, or an ``always`` part
  that is not one fluent against a number, is left to the deadline checker.

Bounds on the same fluent from several places merge into one resource with the
tighter of each (a strict bound beats a non-strict one at the same number).

The counter judges only the resource trajectory of the plan as written. Every
step's effects are applied with the shared :func:`plansieve.critics.state.apply`
whether or not its precondition holds — a failed precondition is the plan
simulator's finding, not this one's — and a step that names no real action is
skipped. Happenings come in the order :func:`plansieve.critics.happenings.schedule`
gives them, shared with the other critics. A sequential plan is read step by
step (a durative action as its start half then its end half, with the step's
duration put in for ``?duration``) with a point after every step; it carries no
time, so timed initial literals are not applied to it. (Without durative
actions the order is simply the written one, read straight from the plan.) A
timed plan is read happening by happening, timed initial literals included, with
a point per happening time, after every happening at that time (they form one
happening in PDDL2.1, Fox & Long 2003, sec. 8). ``concurrent_steps`` lists the
durative steps open at that time: started at or before it and ending after it.

Renewable resources (a pool of vans, loading bays) are fluents a durative
action decreases at its start and increases at its end; when such a bound is
crossed in a timed plan the finding lists the steps running at that time.

A resource without a value breaks its bounds' meaning, so it is a finding too:
one with no initial value, and one whose value an effect could not compute
(after which the counter stops following it).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from fractions import Fraction

from plansieve.critics import render
from plansieve.critics.happenings import schedule
from plansieve.critics.grounding import Calc, GroundAction, Universe, conjuncts, exact, \
    ground_formula
from plansieve.critics.limits import fluent_key
from plansieve.critics.model import And, Compare, Not, Or, Task
from plansieve.critics.plan import Plan
from plansieve.critics.state import DivisionByZero, EffectClash, Undefined, apply, value
from plansieve.critics.verdict import DivisionByZero as DivisionByZeroFinding
from plansieve.critics.verdict import (
    EffectConflict, FluentUndefined, LimitCrossed, ResourceProfile, Verdict,
)
from plansieve.critics.world import World

Number = int | Fraction


@dataclass(frozen=True, slots=True)
class Resource:
    """One ground fluent and its merged bounds; numbers are exact."""

    key: tuple
    floor: Number | None = None
    ceiling: Number | None = None
    floor_strict: bool = False  # the value must stay strictly above the floor
    ceiling_strict: bool = False  # the value must stay strictly below the ceiling
    unit: str | None = None
    label: str | None = None

    @property
    def name(self) -> str:
        return render.ground_atom(self.key)

    def merged(self, other: "Resource") -> "Resource":
        """The tighter of both bounds; the first unit and label given."""
        floor, fs = _tighter(self.floor, self.floor_strict, other.floor, other.floor_strict, max)
        ceiling, cs = _tighter(self.ceiling, self.ceiling_strict, other.ceiling,
                               other.ceiling_strict, min)
        return Resource(self.key, floor, ceiling, fs, cs, self.unit or other.unit,
                        self.label or other.label)


def _tighter(a, a_strict, b, b_strict, pick):
    if a is None:
        return b, b_strict
    if b is None or a != b and pick(a, b) == a:
        return a, a_strict
    if a == b:
        return a, a_strict or b_strict
    return b, b_strict


# ---------------------------------------------------------------------------
# Where resources come from

_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "=": "="}


def _constant(e) -> Number | None:
    """The value of a ground expression that reads no fluent, else None."""
    if type(e) is tuple:
        return None
    try:
        return value(e, {})
    except (Undefined, DivisionByZero, TypeError, ValueError):
        return None


def bound_of(c: Compare) -> Resource | None:
    """A resource bound from a ground comparison of one fluent with a number, else None."""
    op, left, right = c.op, c.left, c.right
    if type(left) is not tuple:
        op, left, right = _FLIP[op], right, left
    if type(left) is not tuple:
        return None
    limit = _constant(right)
    if limit is None:
        return None
    if op in ("<", "<="):
        return Resource(left, ceiling=limit, ceiling_strict=op == "<")
    if op in (">", ">="):
        return Resource(left, floor=limit, floor_strict=op == ">")
    return Resource(left, floor=limit, ceiling=limit)


def _from_constraints(f, universe: Universe, out: list[Resource]) -> None:
    """The bounds in each ``always`` of a ``:constraints`` formula, ``forall``s ground."""
    from plansieve.critics.trajectory import trajectories
    for traj, sub in trajectories(f, universe):
        if traj.op != "always":
            continue
        for g in traj.formulas:
            try:
                ground = ground_formula(g, sub, universe)
            except TypeError:  # a nested modal or preference: not a resource bound
                continue
            for c in conjuncts(ground):
                if isinstance(c, Compare):
                    r = bound_of(c)
                    if r is not None:
                        out.append(r)


def resources_of(task: Task, universe: Universe | None = None) -> list[Resource]:
    """Every resource of ``task``, merged per fluent: the limits file's first, in order."""
    universe = universe or Universe(task)
    found: list[Resource] = []
    if task.limits is not None:
        for r in task.limits.resource:
            found.append(Resource(
                fluent_key(r.fluent),
                None if r.floor is None else exact(r.floor),
                None if r.ceiling is None else exact(r.ceiling),
                unit=r.unit, label=r.label))
    _from_constraints(task.domain.constraints, universe, found)
    _from_constraints(task.problem.constraints, universe, found)
    merged: dict[tuple, Resource] = {}
    for r in found:
        merged[r.key] = merged[r.key].merged(r) if r.key in merged else r
    return list(merged.values())


# ---------------------------------------------------------------------------
# Following one resource


class _Track:
    """One resource's points, gathered while the plan runs and judged after it.

    Point 0 is the initial state. Values are exact; None while the fluent has no
    value. In a sequential plan point ``i`` is the state after step ``i``; in a
    timed plan each point carries the step, part and time that set it.
    """

    __slots__ = ("res", "values", "steps", "times", "parts", "lost")

    def __init__(self, res: Resource) -> None:
        self.res = res
        self.values: list = []
        self.steps: list = []
        self.times: list = []
        self.parts: list = []
        self.lost = False  # an effect on it could not be computed: no points after that


def _writes(ga: GroundAction) -> frozenset:
    """The fluents a ground action's numeric effects may change."""
    keys = {k for _, k, _ in ga.numeric}
    for c in ga.conditional:
        keys.update(k for _, k, _ in c.numeric)
    return frozenset(keys)


def _parts(x) -> list:
    """Every sub-expression of a ground expression or formula, ``x`` included."""
    out, todo = [], [x]
    while todo:
        y = todo.pop()
        out.append(y)
        t = type(y)
        if t is Calc:
            todo.extend(y.args)
        elif t is Compare:
            todo += [y.left, y.right]
        elif t is And or t is Or:
            todo.extend(y.parts)
        elif t is Not:
            todo.append(y.body)
    return out


def _hit_by(ga: GroundAction, trouble: Exception, keys: set) -> set:
    """The resources among ``keys`` whose update ``trouble`` spoilt.

    An effect is spoilt when it reads the undefined fluent (in its right-hand
    side, its condition, or — for increase and the like — its own old value), or
    holds the division by zero; a clash spoils the fluent it is on.
    """
    if isinstance(trouble, EffectClash):
        return {trouble.key} & keys
    hit: set = set()
    effects = [(op, k, rhs, None) for op, k, rhs in ga.numeric]
    for c in ga.conditional:
        effects += [(op, k, rhs, c.condition) for op, k, rhs in c.numeric]
    for op, k, rhs, cond in effects:
        if k not in keys:
            continue
        seen = _parts(rhs) + (_parts(cond) if cond is not None else [])
        if isinstance(trouble, Undefined):
            if trouble.key in seen or op != "assign" and trouble.key == k:
                hit.add(k)
        elif trouble.calc in seen or op == "scale-down" and trouble.calc.args[0] == k:
            hit.add(k)
    return hit


# ---------------------------------------------------------------------------
# The critic


class ResourceCounter:
    """Sound critic: a plan passes only if every resource stays within its bounds throughout."""

    name = "resource-counter"
    version = "1.0"
    sound = True

    def __init__(self) -> None:
        self._worlds: dict[int, tuple[World, list[Resource]]] = {}

    def prepare(self, task: Task) -> tuple[World, list[Resource]]:
        """The compiled task and its resources, kept while the same Task object is checked."""
        got = self._worlds.get(id(task))
        if got is None or got[0].task is not task:
            if len(self._worlds) >= 64:
                self._worlds.clear()
            world = World(task)
            got = self._worlds[id(task)] = (world, resources_of(task, world.universe))
        return got

    def check(self, task: Task, plan: Plan) -> Verdict:
        started = time.perf_counter()
        world, resources = self.prepare(task)
        findings: list = []
        tracks = [_Track(r) for r in resources]
        intervals: dict = {}
        if tracks:
            if plan.is_timed:
                intervals = self._follow_timed(world, plan, tracks, findings)
            else:
                self._follow_steps(world, plan, tracks, findings)
        for t in tracks:
            for f in _crossings(t, plan, intervals):
                # the actions that move the resource back the right way, for feedback
                up = 1 if f.bound == "floor" else -1
                findings.append(f.model_copy(update={
                    "hints": world.hints.for_fluent(t.res.key, up)}))
        findings.sort(key=_finding_order)
        return Verdict(critic=self.name, version=self.version, sound=self.sound,
                       passed=not findings, findings=findings, steps_checked=len(plan.steps),
                       seconds=time.perf_counter() - started,
                       profiles=[p for t in tracks if (p := _profile(t)) is not None])

    # -- sequential plans: one point after every step ------------------------

    @staticmethod
    def _step_actions(world: World, plan: Plan) -> list:
        """Per step, the ground actions to apply in order; none for a step that names no action."""
        if world.task.domain.durative_actions:
            # durative actions read sequentially, ?duration bound: as the schedule has them
            out: list = [[] for _ in plan.steps]
            for h in schedule(world, plan).happenings:
                out[h.step - 1].append(h.action)
            return out
        cache = world.cache
        out = []
        for step in plan.steps:
            got = cache.get((step.action, step.args)) or world.resolve(step)
            out.append(() if got.__class__ is list else got)
        return out

    def _follow_steps(self, world: World, plan: Plan, tracks: list[_Track],
                      findings: list) -> None:
        state = world.initial_state()
        fluents = state.fluents
        keys = {t.res.key for t in tracks}
        _start(tracks, fluents, None, findings)
        # (key, values.append) per followed resource; rebuilt when one is lost
        follow = [(t.res.key, t.values.append) for t in tracks]
        for number, actions in enumerate(self._step_actions(world, plan), 1):
            for ga in actions:
                troubles = apply(ga, state)
                if troubles:
                    _spoilt(ga, troubles, keys, tracks, number, plan.steps[number - 1].call(),
                            None, findings)
                    follow = [(t.res.key, t.values.append) for t in tracks if not t.lost]
            for key, add in follow:
                add(fluents.get(key))

    # -- timed plans: one point per happening time -----------------------------

    def _follow_timed(self, world: World, plan: Plan, tracks: list[_Track],
                      findings: list) -> dict:
        sched = schedule(world, plan)
        state = world.initial_state()
        fluents = state.fluents
        keys = {t.res.key for t in tracks}
        _start(tracks, fluents, 0, findings)
        # Timed literals after the plan's last happening are not part of its run; the
        # plan simulator and the deadline checker stop there too.
        happenings = [h for h in sched.happenings if sched.end is None or h.time <= sched.end]
        writes: dict[int, frozenset] = {}  # id of a ground action -> resources it may change
        i, n = 0, len(happenings)
        while i < n:
            at = happenings[i].time
            j = i
            # resource -> (step, part) of the happening that last changed it
            changed: dict[tuple, tuple] = {}
            while j < n and happenings[j].time == at:
                h = happenings[j]
                ga = h.action
                troubles = apply(ga, state)
                if troubles:
                    text = plan.steps[h.step - 1].call() if h.step is not None else None
                    _spoilt(ga, troubles, keys, tracks, h.step, text, at, findings)
                hit = writes.get(id(ga))
                if hit is None:
                    hit = writes[id(ga)] = _writes(ga) & keys
                for k in hit:
                    changed[k] = (h.step, h.part)
                j += 1
            last = next(((h.step, h.part) for h in reversed(happenings[i:j])
                         if h.step is not None), (None, "til"))
            for t in tracks:
                if not t.lost:
                    step, part = changed.get(t.res.key, last)
                    t.values.append(fluents.get(t.res.key))
                    t.steps.append(step)
                    t.times.append(at)
                    t.parts.append(part)
            i = j
        return sched.intervals


def _start(tracks: list[_Track], fluents: dict, at, findings: list) -> None:
    """The first point: the initial value, or a finding when there is none."""
    for t in tracks:
        v = fluents.get(t.res.key)
        t.values.append(v)
        t.steps.append(None)
        t.times.append(at)
        t.parts.append(None)
        if v is None:
            name = t.res.name
            findings.append(FluentUndefined(
                fluent=name, context="limit", time=0.0,
                message=f"{name} has no value in the initial state, so its "
                        f"{_bounds_text(t.res)} cannot be checked"))


def _spoilt(ga: GroundAction, troubles: list, keys: set, tracks: list[_Track],
            number: int | None, text: str | None, at, findings: list) -> None:
    """Effects that could not be computed: the resources they touch are lost from here on."""
    for trouble in troubles:
        for key in sorted(_hit_by(ga, trouble, keys)):
            track = next(t for t in tracks if t.res.key == key)
            if track.lost:
                continue
            track.lost = True
            name = render.ground_atom(key)
            who = text or "a timed literal"
            when = {} if at is None else {"time": float(at)}
            tail = "; it is not followed after that"
            if isinstance(trouble, EffectClash):
                findings.append(EffectConflict(
                    step=number, step_text=text, fluent=name, effects=trouble.ops, **when,
                    message=f"{who} changes the resource {name} by "
                            f"{' and '.join(trouble.ops)} at once, so its value is unknown{tail}"))
            elif isinstance(trouble, Undefined):
                findings.append(FluentUndefined(
                    step=number, step_text=text, fluent=render.ground_atom(trouble.key),
                    context="effect", **when,
                    message=f"{who} reads {render.ground_atom(trouble.key)}, which has no value, "
                            f"so the resource {name} cannot be updated{tail}"))
            else:
                ex = render.expr(trouble.calc)
                findings.append(DivisionByZeroFinding(
                    step=number, step_text=text, expression=ex, context="effect", **when,
                    message=f"{who} divides by zero in {ex}, so the resource {name} cannot be "
                            f"updated{tail}"))


# ---------------------------------------------------------------------------
# Findings and profiles


def _with_unit(x: Number, unit: str | None) -> str:
    return f"{render.number(x)} {unit}" if unit else render.number(x)


def _bounds_text(r: Resource) -> str:
    parts = []
    if r.floor is not None:
        parts.append(f"floor of {_with_unit(r.floor, r.unit)}")
    if r.ceiling is not None:
        parts.append(f"ceiling of {_with_unit(r.ceiling, r.unit)}")
    return " and ".join(parts)


_WHEN = {"start": "starts", "end": "ends"}


def _where(step: int | None, at, text: str | None, initial: bool, part: str | None) -> str:
    if initial:
        return "in the initial state"
    which = f"step {step} {text}" if text else f"step {step}"
    if at is not None:
        if step is None:
            return f"at time {render.number(at)}, set by a timed literal"
        if part in _WHEN:
            return f"at time {render.number(at)}, when {which} {_WHEN[part]}"
        return f"at time {render.number(at)}, after {which}"
    return f"after {which}"


def _first_and_worst(values: list, out_of_bounds, furthest) -> tuple[int, int] | None:
    """Indexes of the first point past a bound and of the point furthest past it
    (``furthest`` is min for a floor, max for a ceiling)."""
    known = [v for v in values if v is not None] if None in values else values
    if not known:
        return None
    extreme = furthest(known)
    if not out_of_bounds(extreme):
        return None
    first = next(i for i, v in enumerate(values) if v is not None and out_of_bounds(v))
    return first, values.index(extreme)


def _crossings(t: _Track, plan: Plan, intervals: dict) -> list[LimitCrossed]:
    """One finding per bound the resource crosses: where first, by how much, how far at worst."""
    r = t.res
    timed = bool(t.times) and t.times[0] is not None
    out = []
    for bound in ("floor", "ceiling"):
        limit = r.floor if bound == "floor" else r.ceiling
        if limit is None:
            continue
        strict = r.floor_strict if bound == "floor" else r.ceiling_strict
        if bound == "floor":
            def excess(v, limit=limit):
                return limit - v

            def past(v, limit=limit, strict=strict):
                return v < limit or strict and v == limit
        else:
            def excess(v, limit=limit):
                return v - limit

            def past(v, limit=limit, strict=strict):
                return v > limit or strict and v == limit
        found = _first_and_worst(t.values, past, min if bound == "floor" else max)
        if found is None:
            continue
        i, w = found
        v, gap_amount = t.values[i], excess(t.values[i])
        initial = i == 0
        if timed:
            step, at, part = t.steps[i], t.times[i], t.parts[i]
            concurrent = sorted(s for s, (a, b) in intervals.items() if a <= at < b)
        else:
            step, at, part, concurrent = (None if initial else i), None, None, []
        text = plan.steps[step - 1].call() if step is not None else None
        where = _where(step, at, text, initial, part)
        if initial:
            verb = "is"
        else:
            verb = ("falls to" if bound == "floor" else "rises to") if gap_amount else "reaches"
        if gap_amount:
            side = "below" if bound == "floor" else "above"
            gap = (f"{_with_unit(gap_amount, r.unit)} {side} its {bound} of "
                   f"{_with_unit(limit, r.unit)}")
        else:
            side = "above" if bound == "floor" else "below"
            gap = f"which it must stay strictly {side} ({bound} of {_with_unit(limit, r.unit)})"
        label = f" ({r.label})" if r.label else ""
        message = f"{r.name} {verb} {_with_unit(v, r.unit)} {where}, {gap}{label}"
        if concurrent:
            message += "; steps running at that time: " + ", ".join(map(str, concurrent))
        extra: dict = {}
        worst = excess(t.values[w])
        if worst > gap_amount:
            w_step = t.steps[w] if timed else w
            w_at = t.times[w] if timed else None
            extra = {"worst_excess": float(worst), "worst_step": w_step,
                     "worst_time": None if w_at is None else float(w_at)}
            worst_where = (f"at time {render.number(w_at)}" if w_at is not None
                           else f"after step {w_step}")
            message += (f"; at worst {_with_unit(worst, r.unit)} "
                        f"{'below' if bound == 'floor' else 'above'}, {worst_where}")
        out.append(LimitCrossed(
            step=step, step_text=text,
            time=float(at) if at is not None else (0.0 if initial else None),
            resource=r.name, label=r.label, unit=r.unit, bound=bound, limit=float(limit),
            value=float(v), excess=float(gap_amount), strict=strict,
            concurrent_steps=concurrent, message=message, **extra))
    return out


def _finding_order(f) -> tuple:
    """Initial-state findings first, then by time (timed plans) and step."""
    initial = f.step is None and not f.time and getattr(f, "context", None) != "effect"
    return (not initial, f.time or 0.0, f.step or 0)


def _profile(t: _Track) -> ResourceProfile | None:
    """The points with a value, as the verdict carries them; None when there are none.

    ``initial`` is the first value known: the initial state's, unless the fluent had
    none there (a finding) and a step gave it one later.
    """
    r = t.res
    vals = t.values
    if None in vals:
        idx = [i for i, v in enumerate(vals) if v is not None]
    else:
        idx = range(len(vals))
    if not idx:
        return None
    values = [float(vals[i]) for i in idx]
    if t.times[0] is None:  # sequential: point i is after step i
        steps = [i or None for i in idx]
        times = [None] * len(values)
    else:
        steps = [t.steps[i] for i in idx]
        times = [float(t.times[i]) for i in idx]
    # validated in one strict call (every number is already a float or an int): much
    # cheaper than building the points one by one
    return ResourceProfile.model_validate({
        "resource": r.name, "label": r.label, "unit": r.unit,
        "floor": None if r.floor is None else float(r.floor),
        "ceiling": None if r.ceiling is None else float(r.ceiling),
        "steps": steps, "times": times, "values": values, "initial": values[0],
        "peak": max(values), "low": min(values), "final": values[-1]}, strict=True)
