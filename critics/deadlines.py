"""The deadline checker critic: a plan's timing against the task's temporal semantics.

Timed plans are run happening by happening in the order of
:mod:`plansieve.critics.happenings` (PDDL 2.1, Fox & Long 2003, sec. 5 and 8;
timed initial literals from PDDL 2.2, Edelkamp & Hoffmann 2004). At each
happening its conditions are read in the state before it (``at start`` before a
start, ``at end`` before an end) and its effects applied; every finding carries
the plan time. On top of what the plan simulator reports (a false condition, with
``part`` start or end; numeric troubles; an unmet goal) this critic judges:

* ``over all`` conditions, in every state strictly inside the action's open
  interval: the state once every happening at its start time has happened, and
  the state after every later time point before its end
  (:class:`~plansieve.critics.verdict.InvariantBroken`);
* duration constraints (``=``, ``<=``, ``>=`` on ``?duration``, which may read
  fluents; read when the action starts, ``at end`` ones when it ends). A durative
  step needs a duration; an instantaneous step may carry none or ``[0]``: a
  positive duration on it is a finding, since it would end at a time the domain
  does not give it (:class:`~plansieve.critics.verdict.DurationOutOfBounds`);
* interference: happenings of different steps closer than the tolerance (equal
  times included) of which one changes what the other reads or changes
  (:mod:`plansieve.critics.interference`;
  :class:`~plansieve.critics.verdict.HappeningsTooClose`);
* time windows: a fact needed outside the windows its timed initial literals
  leave it is reported with those windows
  (:class:`~plansieve.critics.verdict.WindowViolated`);
* PDDL3 trajectory constraints of the domain and the problem
  (:mod:`plansieve.critics.trajectory`), ``within`` ones and the limits file's
  deadline rules as deadlines, and the limits file's makespan; each deadline
  and the makespan get a line in ``Verdict.timeline``.

The run goes on after a finding (effects still applied), so one verdict shows
every timing problem. The goal is read when the plan ends — after its last
happening, timed literals at that time included; literals stamped later are
outside the plan and not applied.

Sequential plans carry no times. For them this critic judges the trajectory
constraints, deadlines and makespan, reading time as the step number (PDDL3's
reading of non-temporal plans) or as the value of the limits file's clock fluent
after each step, and given durations against duration constraints; conditions
and the goal are the plan simulator's to judge, and windows need a timed plan.
A task with no temporal side at all (no durative actions, timed literals,
trajectory constraints other than resource bounds, deadlines, makespan or clock)
gives an untimed plan nothing to answer for: it passes.
"""

from __future__ import annotations

import math
from fractions import Fraction
from time import perf_counter

from plansieve.critics import render
from plansieve.critics.explain import failed_preconditions, numeric_findings, unmet_goals
from plansieve.critics.grounding import GroundAction, exact, ground_formula
from plansieve.critics.happenings import (
    Happening, binder_of, exact_time, put_duration, schedule, timed_literals, usable,
)
from plansieve.critics.interference import Touch, close_pairs, touch_of
from plansieve.critics.limits import condition_of, fluent_key
from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.state import DivisionByZero, State, Undefined, apply, holds, value
from plansieve.critics.temporal import GroundDuration, parts_of
from plansieve.critics.trajectory import Monitor, Where, Within, collect, deadline, monitor
from plansieve.critics.verdict import (
    DurationOutOfBounds, FluentUndefined, HappeningsTooClose, InvariantBroken, MakespanOver,
    PreconditionFalse, TimelineEntry, Verdict, WindowViolated,
)
from plansieve.critics.windows import Windows, describe
from plansieve.critics.world import World

Time = int | Fraction


def _f(x) -> float:
    return float(x)


class _Compiled:
    """What the checker needs from one task, built once."""

    def __init__(self, task: Task) -> None:
        self.world = world = World(task)
        self.parts = parts_of(world)
        u = world.universe
        self.constraints = (collect(task.domain.constraints, u)
                            + collect(task.problem.constraints, u))
        limits = task.limits
        self.rules = []  # (ground condition, by, text, label)
        self.makespan = None
        self.clock_key = None
        self.clock_text = None
        self.tolerance = None
        if limits is not None:
            for r in limits.deadline:
                g = ground_formula(condition_of(r.condition), {}, u)
                self.rules.append((g, exact(r.by), render.formula(g), r.label))
            if limits.time.makespan is not None:
                self.makespan = exact(limits.time.makespan)
            if limits.time.clock is not None:
                self.clock_key = fluent_key(limits.time.clock)
                self.clock_text = render.ground_atom(self.clock_key)
            self.tolerance = exact(limits.time.tolerance)
        self.literals = timed_literals(world)
        self.windows = Windows(frozenset(task.problem.init), self.literals)
        self._touch: dict[GroundAction, Touch] = {}
        self.temporal = bool(task.domain.durative_actions or self.literals or self.constraints
                             or self.rules or self.makespan is not None
                             or self.clock_key is not None)

    def touch(self, ga: GroundAction) -> Touch:
        """What ``ga`` reads and writes, worked out once per ground action."""
        got = self._touch.get(ga)
        if got is None:
            if len(self._touch) >= 1 << 16:
                self._touch.clear()
            got = self._touch[ga] = touch_of(ga)
        return got

    def monitors(self, clock: str | None) -> tuple[list[Monitor], list[Within]]:
        """Fresh monitors for one run: all constraints, and the deadlines among them.

        ``clock`` names the clock fluent when times are read on it (sequential plans).
        """
        ms = [monitor(c) for c in self.constraints]
        for cond, by, text, label in self.rules:
            ms.append(deadline(cond, by, text, label))
        deadlines = [m for m in ms if isinstance(m, Within)]
        for m in deadlines:
            m.clock = clock
        return ms, deadlines


class DeadlineChecker:
    """Sound critic for temporal plans, time windows, trajectory constraints and deadlines."""

    name = "deadline-checker"
    version = "1.0"
    sound = True

    def __init__(self, tolerance: float | None = None) -> None:
        if tolerance is not None and not 0 < tolerance < math.inf:
            raise ValueError(f"the tolerance must be a finite number above 0, not {tolerance!r}")
        self.tolerance = tolerance
        self._compiled: dict[int, _Compiled] = {}

    def compiled(self, task: Task) -> _Compiled:
        c = self._compiled.get(id(task))
        if c is None or c.world.task is not task:
            if len(self._compiled) >= 64:
                self._compiled.clear()
            c = self._compiled[id(task)] = _Compiled(task)
        return c

    def check(self, task: Task, plan: Plan) -> Verdict:
        started = perf_counter()
        c = self.compiled(task)
        if plan.is_timed:
            tol = exact(self.tolerance) if self.tolerance is not None else (
                c.tolerance if c.tolerance is not None else Fraction(1, 1000))
            run = _TimedRun(c, plan, tol)
        elif c.temporal:
            run = _SequentialRun(c, plan)
        else:
            return Verdict(critic=self.name, version=self.version, sound=self.sound,
                           passed=True, steps_checked=len(plan),
                           seconds=perf_counter() - started)
        findings, timeline = run.run()
        return Verdict(critic=self.name, version=self.version, sound=self.sound,
                       passed=not findings, findings=findings, steps_checked=len(plan),
                       timeline=timeline, seconds=perf_counter() - started)


# ---------------------------------------------------------------------------
# Shared pieces of both runs


class _Run:
    def __init__(self, c: _Compiled, plan: Plan) -> None:
        self.c = c
        self.world = c.world
        self.plan = plan
        self.findings: list = []
        self.binder = binder_of(c.world)
        # a clock fluent gives the time of sequential plans only; timed plans carry theirs
        self.clock = None if plan.is_timed else c.clock_text
        self.monitors, self.deadlines = c.monitors(self.clock)

    def observe(self, w: Where, state: State) -> None:
        for m in self.monitors:
            m.see(w, state.atoms, state.fluents)

    def close(self, last: Where, state: State, end: Time) -> list[TimelineEntry]:
        """Finish the monitors and the makespan; return the timeline."""
        timeline: list[TimelineEntry] = []
        for m in self.monitors:
            self.findings.extend(m.finish(last, state.atoms, state.fluents))
        for m in self.deadlines:
            timeline.append(TimelineEntry(
                what=(f"{m.label}: " if m.label else "") + render.formula(m.c.formulas[0]),
                deadline=_f(m.limit), met=m.met,
                reached_at=None if m.reached is None else _f(m.reached.time)))
        limit = self.c.makespan
        if limit is not None:
            over = end > limit
            timeline.append(TimelineEntry(what="makespan", deadline=_f(limit),
                                          reached_at=_f(end), met=not over))
            if over:
                unit = f" on the clock {self.clock}" if self.clock else ""
                self.findings.append(MakespanOver(
                    makespan=_f(end), limit=_f(limit), excess=_f(end - limit), time=_f(end),
                    message=f"the plan ends at {render.number(end)}{unit}, "
                            f"{render.number(end - limit)} after the limit {render.number(limit)}"))
        return timeline

    def durations(self, number: int, text: str, action: str, ds: tuple[GroundDuration, ...],
                  when: str, d: Time, state: State, t: Time | None) -> None:
        """Judge the duration constraints read at ``when`` in ``state``."""
        for g in ds:
            if g.when != when:
                continue
            try:
                v = value(put_duration(g.value, d), state.fluents)
            except (Undefined, DivisionByZero) as exc:
                self.findings.extend(numeric_findings(
                    [exc], number, text, "precondition", time=None if t is None else _f(t)))
                continue
            if g.holds(d, v):
                continue
            lo = v if g.op in ("=", ">=") else None
            hi = v if g.op in ("=", "<=") else None
            need = {"=": "exactly", "<=": "at most", ">=": "at least"}[g.op]
            self.findings.append(DurationOutOfBounds(
                step=number, step_text=text, time=None if t is None else _f(t), action=action,
                duration=_f(d), minimum=None if lo is None else _f(lo),
                maximum=None if hi is None else _f(hi), constraint=g.text,
                message=f"{text} lasts {render.number(d)}, but {g.text} asks for {need} "
                        f"{render.number(v)}" + (" when it ends" if when == "end" else "")))



# ---------------------------------------------------------------------------
# Timed plans


class _Active:
    """A running durative step whose invariant must hold until its end."""

    __slots__ = ("step", "text", "action", "inv", "start", "end", "reads")

    def __init__(self, step, text, action, inv, start, end, reads):
        self.step, self.text, self.action, self.inv = step, text, action, inv
        self.start, self.end, self.reads = start, end, reads


class _TimedRun(_Run):
    def __init__(self, c: _Compiled, plan: Plan, tolerance: Time) -> None:
        super().__init__(c, plan)
        self.tolerance = tolerance
        self.touch = c.touch

    def run(self):
        world, plan, steps = self.world, self.plan, self.plan.steps
        sched = schedule(world, plan)
        self.findings.extend(sched.problems)
        self.intervals = sched.intervals
        end_time = sched.end
        happenings = [h for h in sched.happenings if h.part != "til" or h.time <= end_time]
        applied: list[tuple[Happening, GroundAction]] = []
        state = world.initial_state()
        active: dict[int, _Active] = {}
        readers: dict[tuple, set[int]] = {}  # key -> active steps whose invariant reads it
        self.observe(Where(0), state)
        last = Where(0)
        i, n = 0, len(happenings)
        while i < n:
            t = happenings[i].time
            group_start = i
            fresh: list[int] = []
            written: set = set()
            writer_of: dict = {}  # key -> the last happening in the group writing it
            while i < n:
                h = happenings[i]
                if h.time is not t:  # equal times are one object (happenings.py)
                    break
                i += 1
                ga = self._happen(h, steps, state, active, readers, fresh)
                applied.append((h, ga))
                tw = self.touch(ga).writes
                if tw:
                    written |= tw
                    for k in tw:
                        writer_of[k] = h
            step_here = next((h for h in reversed(happenings[group_start:i])
                              if h.step is not None), None)
            w = Where(t, step_here.step, steps[step_here.step - 1].call()) if step_here else Where(t)
            self._invariants(t, state, active, readers, fresh, written, writer_of)
            self.observe(w, state)
            last = w
        self._interference(applied, steps)
        self.findings.extend(unmet_goals(world, state, time=_f(end_time)))
        if last.time != end_time:
            last = Where(end_time)
        timeline = self.close(last, state, end_time)
        return self.findings, timeline

    # -- one happening ---------------------------------------------------------

    def _happen(self, h: Happening, steps, state: State, active, readers, fresh) -> GroundAction:
        if h.part == "til":
            apply(h.action, state)  # a literal sets one fact or a number: nothing can go wrong
            return h.action
        number = h.step
        step = steps[number - 1]
        text = step.call()
        t = h.time
        if h.part == "step":
            ga = h.action
            if step.duration is not None and step.duration != 0:
                self.findings.append(DurationOutOfBounds(
                    step=number, step_text=text, time=_f(t), action=step.action,
                    duration=_f(step.duration), minimum=0, maximum=0,
                    constraint="(instantaneous)",
                    message=f"{text} is an instantaneous action, but the step gives it the "
                            f"duration {render.number(step.duration)}"))
            self._conditions(ga, state, number, text, t, "step")
        else:
            parts = self.c.parts.of(step.action, step.args, self.world.resolve(step))
            d = exact_time(step.duration)
            ga = h.action  # the start or end part, ?duration bound (happenings.py)
            if h.part == "start":
                self.durations(number, text, step.action, parts.durations, "start", d, state, t)
                self._conditions(ga, state, number, text, t, "start")
                inv = self.binder.bind(parts.invariant, d)
                end = self.intervals[number][1]
                if (inv.pre_pos or inv.pre_neg or inv.pre_other) and end > t:
                    reads = self.touch(inv).reads
                    active[number] = _Active(number, text, step.action, inv, t, end, reads)
                    for k in reads:
                        readers.setdefault(k, set()).add(number)
                    fresh.append(number)
            else:
                gone = active.pop(number, None)
                if gone is not None:
                    for k in gone.reads:
                        readers[k].discard(number)
                self.durations(number, text, step.action, parts.durations, "end", d, state, t)
                self._conditions(ga, state, number, text, t, "end")
        troubles = apply(ga, state)
        if troubles:
            self.findings.extend(numeric_findings(troubles, number, text, "effect", time=_f(t)))
        return ga

    def _conditions(self, ga: GroundAction, state: State, number: int, text: str, t: Time,
                    part: str) -> None:
        atoms = state.atoms
        if ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms):
            if not ga.pre_other:
                return
            try:
                if all(holds(f, atoms, state.fluents) for f in ga.pre_other):
                    return
            except (Undefined, DivisionByZero):
                pass  # explained below
        windows = self.c.windows

        def literal(key, positive):
            if not windows.controls(key):
                return None
            # the value the timed literals alone give the fact at t, for this part
            if windows.value_at(key, t, literals_at_t=part != "end") == positive:
                return None  # inside a window: the plan itself made the fact wrong
            return self._window_finding(key, positive, ga.name, number, text, t, part)

        self.findings.extend(failed_preconditions(
            self.world, ga, state, number, text, time=_f(t),
            part=part if part in ("start", "end") else None, literal=literal))

    def _window_finding(self, key, positive, action, number, text, t, part) -> WindowViolated:
        ws = self.c.windows.windows(key, positive)
        cond = render.ground_atom(key) if positive else f"(not {render.ground_atom(key)})"
        what = {"start": "at its start", "end": "at its end", "over-all": "while it runs",
                "step": ""}[part]
        when = f" {what}" if what else ""
        return WindowViolated(
            step=number, step_text=text, time=_f(t), action=action, condition=cond, part=part,
            windows=ws,
            message=f"{text} needs {cond}{when} at time {render.number(t)}, but timed "
                    f"literals make it hold only {describe(ws)}")

    # -- invariants --------------------------------------------------------------

    def _invariants(self, t, state, active, readers, fresh, written, writer_of) -> None:
        """Check the ``over all`` conditions that may have changed at time point ``t``."""
        due = set(fresh)
        for k in written:
            got = readers.get(k)
            if got:
                due |= got
        for number in sorted(due):
            a = active.get(number)
            if a is None or not a.start <= t < a.end:
                continue
            broken = self._broken(a, t, state, writer_of, number in fresh)
            if broken:
                self.findings.extend(broken)
                del active[number]  # reported once per step
                for k in a.reads:
                    readers[k].discard(number)

    def _broken(self, a: _Active, t, state: State, writer_of, fresh: bool) -> list:
        windows = self.c.windows

        def literal(key, positive):
            if windows.controls(key) and windows.value_at(key, t, literals_at_t=True) != positive:
                return self._window_finding(key, positive, a.action, a.step, a.text, t,
                                            "over-all")
            return None

        out = []
        for f in failed_preconditions(self.world, a.inv, state, a.step, a.text, time=_f(t),
                                      literal=literal):
            if not isinstance(f, PreconditionFalse):
                out.append(f)
                continue
            # who changed it at this time point: a writer of a fact the failed part names
            # first, else of anything the invariant reads
            changed = sorted((k for k in a.reads if k in writer_of), key=repr)
            named = [k for k in changed if render.ground_atom(k) in f.condition]
            by = _who(writer_of[(named or changed)[0]], self.plan.steps) if changed else None
            if by is not None:
                cause = f", made false by {by}"
            elif fresh:
                cause = ", already false when it starts"
            else:
                cause = ""
            out.append(InvariantBroken(
                step=a.step, step_text=a.text, time=_f(t), action=a.action,
                condition=f.condition, interval_start=_f(a.start), interval_end=_f(a.end),
                broken_at=_f(t), broken_by=by,
                message=f"{a.text} needs {f.condition} throughout {render.number(a.start)} to "
                        f"{render.number(a.end)}, but it is false at {render.number(t)}{cause}"))
        return out

    # -- interference -------------------------------------------------------------

    def _interference(self, applied: list, steps) -> None:
        times = [h.time for h, _ in applied]
        owners = [h.step if h.step is not None else ("til", k) for k, (h, _) in enumerate(applied)]
        touches = [self.touch(ga) for _, ga in applied]
        tol = self.tolerance
        for c in close_pairs(times, owners, touches, tol):
            (h1, _), (h2, _) = applied[c.first], applied[c.second]
            if h1.step is None and h2.step is None:
                continue  # two timed literals: the problem's own business
            mine, other = (h2, h1) if h2.step is not None else (h1, h2)
            shared = render.ground_atom(c.shared)
            self.findings.append(HappeningsTooClose(
                step=mine.step, step_text=steps[mine.step - 1].call(), time=_f(mine.time),
                other_step=other.step, other_step_text=_who(other, steps, bare=True),
                gap=_f(c.gap), tolerance=_f(tol), shared=shared,
                message=f"{_who(h1, steps)} and {_who(h2, steps)} are "
                        f"{render.number(c.gap)} apart, less than the {render.number(tol)} "
                        f"that must separate happenings that both touch {shared}"))


def _who(h: Happening, steps, bare: bool = False) -> str:
    """A happening in words: ``the start of (drive t1 a b) at 4``."""
    if h.step is None:
        eff = render.effect(h.action.schema.effects[0])
        text = f"(at {render.number(h.time)} {eff})"
        return text if bare else f"the timed literal {text}"
    text = steps[h.step - 1].call()
    if bare:
        return text
    at = render.number(h.time)
    if h.part in ("start", "end"):
        return f"the {h.part} of {text} at {at}"
    return f"{text} at {at}"


# ---------------------------------------------------------------------------
# Sequential plans


class _SequentialRun(_Run):
    def run(self):
        world, plan, steps = self.world, self.plan, self.plan.steps
        sched = schedule(world, plan)
        self.findings.extend(sched.problems)
        state = world.initial_state()
        clock = self.c.clock_key
        clock_broken = False

        def now(count: int):
            nonlocal clock_broken
            if clock is None:
                return count
            v = state.fluents.get(clock)
            if v is None:
                if not clock_broken:
                    clock_broken = True
                    self.findings.append(FluentUndefined(
                        fluent=self.c.clock_text, context="effect", step=count or None,
                        step_text=steps[count - 1].call() if count else None,
                        message=f"the clock {self.c.clock_text} has no value "
                                f"{'after step ' + str(count) if count else 'at the start'}, "
                                f"so times cannot be read on it"))
                return count
            return v

        first = Where(now(0))
        self.observe(first, state)
        last = first
        hs = sched.happenings
        i, n = 0, len(hs)
        while i < n:
            number = hs[i].step
            step = steps[number - 1]
            text = step.call()
            while i < n and hs[i].step == number:
                h = hs[i]
                i += 1
                if h.part in ("start", "end") and step.duration is not None and usable(
                        step.duration):
                    d = exact_time(step.duration)
                    parts = self.c.parts.of(step.action, step.args, world.resolve(step))
                    self.durations(number, text, step.action, parts.durations, h.part, d,
                                   state, None)
                apply(h.action, state)  # troubles are the plan simulator's to report
            last = Where(now(number), number, text)
            self.observe(last, state)
        end = last.time if clock is not None and not clock_broken else len(steps)
        timeline = self.close(last, state, end)
        return self.findings, timeline

