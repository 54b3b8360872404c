"""Greedy best-first search for the local guesser: ground what is reachable, then search.

The guesser needs real plans to start from, made with the same grounding and state
code the critics use, so that a plan it finds is a plan the plan simulator accepts.

1. Grounding by relaxed reachability: starting from the initial atoms, an action
   schema is instantiated only with arguments that make its positive literal
   preconditions true in the atoms reached so far (typed by the Universe); the
   effects of every accepted action are added, delete effects ignored, until
   nothing new is reached. Big object sets then cost only what is reachable.
2. Heuristics over that delete-free relaxation, as published:
   h_add (Bonet & Geffner 2001, "Planning as heuristic search", AIJ 129) and
   h_FF, the length of the relaxed plan extracted from the relaxed planning graph
   (Hoffmann & Nebel 2001, "The FF planning system", JAIR 14, sec. 4).
   Numeric conditions, negative literals and disjunctions are treated as
   satisfiable there. So that numeric goals are not invisible, each goal condition
   outside the relaxation that is false in the state adds one (our own addition).
3. Greedy best-first search on the real states: successors apply the actual
   State (numeric conditions and effects checked for real), duplicates are
   detected on (atoms, fluent values), ties are broken by a seeded random.Random.

A durative action is compressed into one step: its start half, then at once its
end half (the sequential reading the plan simulator uses). The plan gets times:
each step starts after the previous one ends plus a separation, PDDL2.1's
epsilon (Fox & Long 2003, sec. 8), and lasts what ``(= ?duration expr)``
evaluates to in the state before it.
"""

from __future__ import annotations

import dataclasses
import heapq
import random
from dataclasses import dataclass
from fractions import Fraction

from plansieve.critics.grounding import Calc, GroundAction, Universe, ground_expr
from plansieve.critics.model import (
    Action, Add, And, Assign, Atom, Compare, Delete, DurationRef, DurativeAction, Equal,
    ForallEffect, FluentRef, Not, Or, Task, Timed, TimedEffect, Truth, When,
)
from plansieve.critics.plan import PlanStep
from plansieve.critics.state import (
    DivisionByZero, State, Undefined, applicable, apply, holds, value,
)
from plansieve.critics.world import World

HEURISTICS = ("ff", "add")
INF = float("inf")


@dataclass(frozen=True)
class SearchResult:
    """What the search found: untimed steps with their durations, or why there are none.

    ``durations`` has one entry per step (None for an instantaneous action);
    ``timed`` is True when the domain has durative actions, so the plan is written
    with start times. ``evaluated`` counts the states the heuristic looked at.
    """

    steps: tuple[PlanStep, ...] | None
    durations: tuple[Fraction | int | None, ...] = ()
    timed: bool = False
    reason: str = ""
    expanded: int = 0
    evaluated: int = 0
    separation: Fraction = Fraction(1, 100)

    @property
    def found(self) -> bool:
        return self.steps is not None

    @property
    def plan(self) -> tuple[PlanStep, ...] | None:
        """The plan as steps, with start times and durations when ``timed``."""
        if self.steps is None:
            return None
        if not self.timed:
            return self.steps
        return lay_out(self.steps, self.durations, self.separation)


def lay_out(steps, durations, separation) -> tuple[PlanStep, ...]:
    """Give steps start times one after another: each starts when the last ended plus
    ``separation``; a step without a duration takes no time."""
    out, t = [], Fraction(0)
    sep = Fraction(separation) if not isinstance(separation, float) else Fraction(repr(separation))
    for step, d in zip(steps, durations):
        out.append(PlanStep(step.action, step.args, float(t),
                            None if d is None else float(d)))
        t += (d or 0) + sep
    return tuple(out)


# ---------------------------------------------------------------------------
# Moves: one plan step, as one or two ground halves plus its relaxation


@dataclass(eq=False)
class Move:
    step: PlanStep
    halves: tuple[GroundAction, ...]
    plain: bool
    # the atom whose truth triggers a look at this move (None: look in every state)
    trigger: tuple | None
    # relaxed: what must hold before, what it adds (dynamic atoms only)
    pre: frozenset
    adds: frozenset
    # relaxed conditional parts: (extra precondition atoms, added atoms)
    conditional: tuple
    # ground duration constraints [(op, ground expr)], None for an instantaneous action
    duration: tuple | None = None


class _Unsupported(Exception):
    pass


def _duration_of(constraints, fluents) -> Fraction | int | None:
    """The duration a step gets: the value fixed by ``=``, else the largest ``>=`` bound.

    Returns None when the constraints cannot be met or read in this state.
    """
    try:
        vals = [(op, value(e, fluents)) for op, e in constraints]
    except (Undefined, DivisionByZero):
        return None
    fixed = {v for op, v in vals if op == "="}
    if len(fixed) > 1:
        return None
    if fixed:
        d = fixed.pop()
    else:
        lows = [v for op, v in vals if op == ">="]
        d = max(lows)
    for op, v in vals:
        if (op == ">=" and d < v) or (op == "<=" and d > v) or (op == "<" and d >= v) or (
                op == ">" and d <= v):
            return None
    return d if d >= 0 else None


def _duration_constraints(da: DurativeAction, args: tuple[str, ...]):
    """Ground the duration constraints; raise _Unsupported when no duration can be chosen."""
    sub = {p.name: a for p, a in zip(da.params, args)}
    out = []
    for c in da.duration:
        if c.when not in (None, "start"):
            raise _Unsupported(f"'{da.name}' bounds its duration at end")
        out.append((c.op, ground_expr(c.value, sub)))
    ops = {op for op, _ in out}
    if "=" not in ops and ">=" not in ops:
        raise _Unsupported(f"'{da.name}' has no duration fixed by = or bounded below by >=")
    return tuple(out)


def _mentions_duration(x) -> bool:
    if isinstance(x, DurationRef):
        return True
    if isinstance(x, (tuple, list, frozenset)):
        return any(_mentions_duration(y) for y in x)
    if isinstance(x, Calc):
        return any(_mentions_duration(a) for a in x.args)
    if dataclasses.is_dataclass(x) and not isinstance(x, type):
        return any(_mentions_duration(getattr(x, f.name)) for f in dataclasses.fields(x)
                   if f.name not in ("schema", "loc"))
    return False


# ---------------------------------------------------------------------------
# Static facts of the domain


def _effect_predicates(effects, out: set) -> None:
    for e in effects:
        if isinstance(e, (Add, Delete)):
            out.add(e.atom.predicate)
        elif isinstance(e, (When, ForallEffect)):
            _effect_predicates(e.effects, out)
        elif isinstance(e, TimedEffect):
            _effect_predicates((e.effect,), out)


def _reads(x, out: set, skip_target: bool = False) -> None:
    """Function names read anywhere in ``x`` (a model node or tuple); targets of
    numeric effects are not reads."""
    if isinstance(x, FluentRef):
        out.add(x.function)
    elif isinstance(x, Assign):
        _reads(x.value, out)
    elif isinstance(x, (tuple, list)):
        for y in x:
            _reads(y, out)
    elif dataclasses.is_dataclass(x) and not isinstance(x, type):
        for f in dataclasses.fields(x):
            if f.name not in ("loc", "params"):
                _reads(getattr(x, f.name), out)


def _static_value(f, static_preds: frozenset, init: frozenset):
    """True or False when ``f`` is decided by static facts alone, else None."""
    t = type(f)
    if t is Truth:
        return f.value
    if t is Equal:
        return f.left == f.right
    if t is Atom:
        return (f.predicate, *f.args) in init if f.predicate in static_preds else None
    if t is Not:
        v = _static_value(f.body, static_preds, init)
        return None if v is None else not v
    if t is And or t is Or:
        vals = [_static_value(p, static_preds, init) for p in f.parts]
        decisive = t is Or
        if decisive in vals:
            return decisive
        return None if None in vals else not decisive
    if t is Compare:
        left, right = f.left, f.right
        if type(left) in (int, Fraction) and type(right) in (int, Fraction):
            return holds(f, set(), {})
    return None


def _positive_atoms(f) -> list:
    """The atoms a ground condition needs true at its top level (a relaxation)."""
    if isinstance(f, Atom):
        return [(f.predicate, *f.args)]
    if isinstance(f, And):
        return [a for p in f.parts for a in _positive_atoms(p)]
    return []


# ---------------------------------------------------------------------------
# Grounding by relaxed reachability


def _lifted_atoms(formula, params) -> list:
    """Positive literal preconditions of a schema as (predicate, terms): a term is a
    parameter index or a constant. Atoms under a quantifier are left out."""
    index = {p.name: i for i, p in enumerate(params)}
    out = []

    def walk(f):
        if isinstance(f, And):
            for p in f.parts:
                walk(p)
        elif isinstance(f, Timed):
            if f.when == "start":
                walk(f.body)
        elif isinstance(f, Atom):
            terms = []
            for a in f.args:
                if a.startswith("?"):
                    if a not in index:
                        return
                    terms.append(index[a])
                else:
                    terms.append(a)
            out.append((f.predicate, tuple(terms)))

    walk(formula)
    return out


class _AtomIndex:
    """Reached atoms by predicate, and by (predicate, position, object)."""

    def __init__(self, atoms) -> None:
        self.by_pred: dict[str, list] = {}
        self.by_arg: dict[tuple, list] = {}
        for a in atoms:
            self.by_pred.setdefault(a[0], []).append(a[1:])
            for i, o in enumerate(a[1:]):
                self.by_arg.setdefault((a[0], i, o), []).append(a[1:])


def _bindings(params, atoms, universe: Universe, index: _AtomIndex):
    """Every typed argument tuple under which each of ``atoms`` is among the reached ones."""
    n = len(params)
    chosen: list = [None] * n
    types = [p.types for p in params]

    def candidates(pred, terms):
        best = index.by_pred.get(pred, ())
        for i, t in enumerate(terms):
            fixed = chosen[t] if isinstance(t, int) else t
            if fixed is not None:
                got = index.by_arg.get((pred, i, fixed), ())
                if len(got) < len(best):
                    best = got
        return best

    def extend(todo):
        if not todo:
            rest = [i for i in range(n) if chosen[i] is None]
            yield from fill(rest, 0)
            return
        # the atom with the fewest matches next
        k = min(range(len(todo)), key=lambda j: len(candidates(*todo[j])))
        pred, terms = todo[k]
        remaining = todo[:k] + todo[k + 1:]
        for args in candidates(pred, terms):
            if len(args) != len(terms):
                continue
            bound = []
            ok = True
            for t, o in zip(terms, args):
                if isinstance(t, int):
                    if chosen[t] is None:
                        if not universe.fits(o, types[t]):
                            ok = False
                            break
                        chosen[t] = o
                        bound.append(t)
                    elif chosen[t] != o:
                        ok = False
                        break
                elif t != o:
                    ok = False
                    break
            if ok:
                yield from extend(remaining)
            for t in bound:
                chosen[t] = None

    def fill(rest, j):
        if j == len(rest):
            yield tuple(chosen)
            return
        i = rest[j]
        for o in universe.of_types(types[i]):
            chosen[i] = o
            yield from fill(rest, j + 1)
        chosen[i] = None

    yield from extend(list(atoms))


class Reachable:
    """The task's reachable moves, grounded once; what the search and heuristics share."""

    def __init__(self, world: World) -> None:
        task = world.task
        self.world = world
        domain = task.domain
        schemas: list = list(domain.actions.values()) + list(domain.durative_actions.values())
        changed: set = set()
        for s in schemas:
            _effect_predicates(s.effects, changed)
        for til in task.problem.timed_literals:  # the simulator ignores them; stay careful
            _effect_predicates((til.effect,), changed)
        init = frozenset(task.problem.init)
        self.static_preds = frozenset(p for p in domain.predicates if p not in changed)
        static_preds = self.static_preds
        self.static_true = frozenset(a for a in init if a[0] in static_preds)
        self.unsupported: list[str] = []

        # functions whose values matter for what can happen next (see _Search.fluent_key)
        read: set = set()
        for s in schemas:
            _reads(s.precondition if isinstance(s, Action) else s.condition, read)
            _reads(s.effects, read)
            if isinstance(s, DurativeAction):
                _reads(s.duration, read)
        _reads(task.problem.goal, read)
        self.read_functions = frozenset(read)

        lifted = [(s, _lifted_atoms(s.precondition if isinstance(s, Action) else s.condition,
                                    s.params)) for s in schemas]
        reached = set(init)
        self.moves: list[Move] = []
        seen: set = set()  # (name, args) accepted or ruled out for good
        universe = world.universe
        while True:
            grew = False
            index = _AtomIndex(reached)
            for schema, atoms in lifted:
                for args in _bindings(schema.params, atoms, universe, index):
                    key = (schema.name, args)
                    if key in seen:
                        continue
                    move = self._move(schema, args)
                    if move is None:
                        seen.add(key)
                        continue
                    if not move.pre <= reached:
                        continue  # perhaps in a later round
                    seen.add(key)
                    self.moves.append(move)
                    new = move.adds.union(*(a for _, a in move.conditional)) - reached
                    if new:
                        reached |= new
                        grew = True
            if not grew:
                break
        self.reached = frozenset(reached)
        self.moves.sort(key=lambda m: (m.step.action, m.step.args))

        # integer ids for the atoms the relaxation tracks (every reachable changing atom)
        dynamic = sorted(a for a in reached if a[0] not in static_preds)
        self.atom_id = {a: i for i, a in enumerate(dynamic)}
        self.trigger_index: dict[tuple, list[int]] = {}
        self.always: list[int] = []
        for i, m in enumerate(self.moves):
            if m.trigger is None:
                self.always.append(i)
            else:
                self.trigger_index.setdefault(m.trigger, []).append(i)

        # the goal: atoms the relaxation sees, the rest judged in the real state
        self.goal_atoms: list[tuple] = []
        self.goal_other: list = []
        self.goal_blocked: str = ""
        for g in world.goal:
            if isinstance(g, Atom):
                key = g.key
                if key[0] in static_preds:
                    if key not in init:
                        self.goal_blocked = f"the goal needs {_show(key)}, which never changes " \
                                            f"and is false"
                    continue
                if key not in self.atom_id:
                    self.goal_blocked = (f"the goal needs {_show(key)}, which no sequence of "
                                         f"actions can make true")
                    continue
                self.goal_atoms.append(key)
            elif isinstance(g, Truth) and not g.value:
                self.goal_blocked = "the goal is false whatever happens"
            else:
                self.goal_other.append(g)
        self.goal_set = frozenset(self.goal_atoms)

    def _move(self, schema, args) -> Move | None:
        step = PlanStep(schema.name, args)
        halves = self.world.resolve(step)
        if halves.__class__ is list:
            return None  # a typing problem; bindings are typed, so not expected
        static_preds, static_true = self.static_preds, self.static_true
        duration = None
        if isinstance(schema, DurativeAction):
            try:
                duration = _duration_constraints(schema, args)
            except _Unsupported as exc:
                self._note(str(exc))
                return None
        if any(_mentions_duration((h.pre_other, h.numeric, h.conditional)) for h in halves):
            self._note(f"'{schema.name}' reads ?duration in a condition or effect")
            return None
        # rule out what static facts already decide
        for h in halves:
            if any(a[0] in static_preds and a in static_true for a in h.pre_neg):
                return None
            if any(_static_value(f, static_preds, static_true) is False for f in h.pre_other):
                return None
        first = halves[0]
        if any(a[0] in static_preds and a not in static_true for a in first.pre_pos):
            return None
        pre = set(first.pre_pos)
        adds = set(first.adds)
        cond = [(frozenset(_positive_atoms(c.condition)), c.adds) for c in first.conditional]
        if len(halves) == 2:
            end = halves[1]
            made = first.adds.union(*(c.adds for c in first.conditional))
            need = end.pre_pos - made
            if any(a[0] in static_preds and a not in static_true for a in need):
                return None
            pre |= need
            adds = (adds - end.dels) | end.adds
            cond = [(c, a - end.dels) for c, a in cond]
            cond += [(frozenset(_positive_atoms(c.condition)) - made, c.adds)
                     for c in end.conditional]
        dynamic = [a for a in sorted(first.pre_pos) if a[0] not in static_preds]
        conditional = []
        for c_pre, c_adds in cond:
            if any(a[0] in static_preds and a not in static_true for a in c_pre):
                continue
            conditional.append((frozenset(a for a in c_pre if a[0] not in static_preds),
                                frozenset(c_adds)))
        return Move(step=step, halves=tuple(halves), plain=all(h.plain for h in halves),
                    trigger=dynamic[0] if dynamic else None,
                    pre=frozenset(a for a in pre if a[0] not in static_preds),
                    adds=frozenset(adds), conditional=tuple(conditional), duration=duration)

    def _note(self, what: str) -> None:
        if what not in self.unsupported:
            self.unsupported.append(what)


def _show(key: tuple) -> str:
    return "(" + " ".join(key) + ")"


# ---------------------------------------------------------------------------
# Heuristics over the delete relaxation


class Relaxation:
    """The relaxed task as integer arrays, for fast heuristic evaluation.

    Each relaxed operator is (precondition ids, added ids, move index): one per
    move, plus one per conditional effect with its condition's atoms added to the
    precondition (conditions beyond plain atoms are relaxed away).
    """

    def __init__(self, reach: Reachable) -> None:
        ids = reach.atom_id
        self.ids = ids
        self.n_atoms = len(ids)
        pres, adds, owner = [], [], []
        for mi, m in enumerate(reach.moves):
            parts = [(m.pre, m.adds)] + [(m.pre | c, a) for c, a in m.conditional]
            for p, a in parts:
                a_ids = tuple(sorted(ids[x] for x in a if x in ids))
                # a conditional effect whose condition is never reached never fires
                if not a_ids or not all(x in ids for x in p):
                    continue
                pres.append(tuple(sorted(ids[x] for x in p)))
                adds.append(a_ids)
                owner.append(mi)
        self.pre, self.adds, self.owner = pres, adds, owner
        self.pre_len = [len(p) for p in pres]
        self.pre_of: list[list[int]] = [[] for _ in range(self.n_atoms)]
        self.add_of: list[list[int]] = [[] for _ in range(self.n_atoms)]
        self.no_pre = [o for o, p in enumerate(pres) if not p]
        for o, p in enumerate(pres):
            for x in p:
                self.pre_of[x].append(o)
        for o, a in enumerate(adds):
            for x in a:
                self.add_of[x].append(o)
        self.goal = tuple(sorted(ids[g] for g in reach.goal_atoms))

    def state_ids(self, atoms) -> list[int]:
        ids = self.ids
        return [ids[a] for a in atoms if a in ids]

    def _explore(self, state: list[int], use_max: bool):
        """Generalized Dijkstra over the relaxation (Knuth 1977): atom costs under sum
        (h_add) or max (the layers of the relaxed planning graph). Costs are integers,
        so a bucket per cost replaces the heap. Stops once every goal atom is settled.

        Returns (atom cost, operator cost, operator difficulty or None, preconditions
        still waiting per operator: 0 means the operator was reached).
        """
        n = self.n_atoms
        cost = [INF] * n
        n_ops = len(self.pre)
        op_cost = [0] * n_ops
        diff = [0] * n_ops if use_max else None
        waiting = self.pre_len[:]
        done = [False] * n
        adds, pre_of = self.adds, self.pre_of
        for x in state:
            cost[x] = 0
        buckets: list[list[int]] = [list(state)]
        for o in self.no_pre:
            for y in adds[o]:
                if cost[y] > 1:
                    cost[y] = 1
                    if len(buckets) < 2:
                        buckets.append([])
                    buckets[1].append(y)
        pending = {g for g in self.goal if cost[g] != 0}
        c = 0
        while pending and c < len(buckets):
            for x in buckets[c]:
                if done[x] or cost[x] != c:
                    continue
                done[x] = True
                if x in pending:
                    pending.discard(x)
                    if not pending:
                        break
                for o in pre_of[x]:
                    if use_max:
                        diff[o] += c
                        if c > op_cost[o]:
                            op_cost[o] = c
                        oc = op_cost[o]
                    else:
                        oc = op_cost[o] = op_cost[o] + c
                    w = waiting[o] = waiting[o] - 1
                    if w == 0:
                        c1 = oc + 1
                        for y in adds[o]:
                            if c1 < cost[y]:
                                cost[y] = c1
                                while len(buckets) <= c1:
                                    buckets.append([])
                                buckets[c1].append(y)
            c += 1
        return cost, op_cost, diff, waiting

    def h_add(self, state: list[int]) -> float:
        """h_add: the sum over goal atoms of their additive cost (Bonet & Geffner 2001)."""
        cost = self._explore(state, use_max=False)[0]
        return sum(cost[g] for g in self.goal)

    def h_ff(self, state: list[int]) -> float:
        """h_FF: the number of actions in a relaxed plan (see :meth:`relaxed_plan`)."""
        chosen = self.relaxed_plan(state)
        if chosen is None:
            return INF
        return len({self.owner[o] for o in chosen})

    def relaxed_plan(self, state: list[int]) -> list[int] | None:
        """The relaxed operators FF's backward pass picks, or None when the goal is out of reach.

        Extracted from the goal layer down: each subgoal takes an achiever from the
        layer just below, the one whose preconditions are easiest (smallest sum of
        layers); atoms that a chosen achiever adds are not asked for again at that
        layer or the one below (Hoffmann & Nebel 2001, sec. 4.3).
        """
        level, op_level, diff, waiting = self._explore(state, use_max=True)
        goals: dict[int, set] = {}
        for g in self.goal:
            if level[g] == INF:
                return None
            if level[g] > 0:
                goals.setdefault(level[g], set()).add(g)
        chosen: list[int] = []
        if not goals:
            return chosen
        true_at: dict[int, set] = {}
        pre, adds, add_of = self.pre, self.adds, self.add_of
        for i in range(max(goals), 0, -1):
            for g in sorted(goals.get(i, ())):
                if g in true_at.get(i, ()):
                    continue
                best = None
                for o in add_of[g]:
                    if waiting[o] == 0 and op_level[o] == i - 1:
                        if best is None or diff[o] < diff[best]:
                            best = o
                chosen.append(best)
                below = true_at.setdefault(i - 1, set())
                for p in pre[best]:
                    if level[p] != 0 and p not in below:
                        goals.setdefault(level[p], set()).add(p)
                here = true_at.setdefault(i, set())
                for a in adds[best]:
                    here.add(a)
                    below.add(a)
        return chosen


# ---------------------------------------------------------------------------
# The search


def _true(f, atoms, fluents) -> bool:
    """Whether a ground condition holds; one that cannot be computed counts as false."""
    try:
        return holds(f, atoms, fluents)
    except (Undefined, DivisionByZero):
        return False


class _Limits:
    """The task's limits file as pruning rules: a state that already breaks a resource
    bound, or passes a deadline on the clock with its condition false, leads nowhere
    the critics would accept. The search is still a guess: it may miss plans that
    meet a deadline by making its condition true and false again."""

    def __init__(self, world: World) -> None:
        from plansieve.critics.grounding import exact, ground_formula
        from plansieve.critics.limits import condition_of, fluent_key
        from plansieve.critics.resources import resources_of

        self.bounds = [(r.key, r.floor, r.floor_strict, r.ceiling, r.ceiling_strict)
                       for r in resources_of(world.task, world.universe)]
        self.clock = None
        self.deadlines: list = []
        lim = world.task.limits
        if lim is not None and lim.time.clock is not None:
            self.clock = fluent_key(lim.time.clock)
            self.deadlines = [(exact(d.by), ground_formula(condition_of(d.condition), {},
                                                           world.universe))
                              for d in lim.deadline]
        self.functions = frozenset(k[0] for k, *_ in self.bounds) | (
            frozenset([self.clock[0]]) if self.clock else frozenset())

    def __bool__(self) -> bool:
        return bool(self.bounds or self.deadlines)

    def allow(self, atoms, fluents) -> bool:
        for key, lo, lo_strict, hi, hi_strict in self.bounds:
            v = fluents.get(key)
            if v is None:
                continue
            if lo is not None and (v < lo or (lo_strict and v == lo)):
                return False
            if hi is not None and (v > hi or (hi_strict and v == hi)):
                return False
        if self.deadlines:
            now = fluents.get(self.clock)
            for by, cond in self.deadlines:
                if now is not None and now > by and not _true(cond, atoms, fluents):
                    return False
        return True


class _Search:
    def __init__(self, reach: Reachable, heuristic: str) -> None:
        self.reach = reach
        self.relax = Relaxation(reach)
        self.h = self.relax.h_ff if heuristic == "ff" else self.relax.h_add
        self.limits = _Limits(reach.world)
        # bounded fluents matter by value, even when no action reads them
        self.read = reach.read_functions | self.limits.functions

    def fluent_key(self, fluents: dict):
        """Fluent part of a duplicate key. A fluent never read (only changed, like
        total-cost under :action-costs) matters only by whether it has a value, so
        states that differ only in it are one state for the search."""
        read = self.read
        return frozenset((k, v) if k[0] in read else (k,) for k, v in fluents.items())

    def goal_reached(self, atoms, fluents) -> bool:
        if not self.reach.goal_set <= atoms:
            return False
        return all(_true(g, atoms, fluents) for g in self.reach.goal_other)

    def evaluate(self, atoms, fluents) -> float:
        h = self.h(self.relax.state_ids(atoms))
        if h == INF:
            return INF
        # each goal condition the relaxation cannot see that is false adds one
        return h + sum(not _true(g, atoms, fluents) for g in self.reach.goal_other)

    def successors(self, atoms, fluents):
        reach = self.reach
        index = reach.trigger_index
        picked = list(reach.always)
        for a in atoms:
            got = index.get(a)
            if got:
                picked.extend(got)
        picked.sort()
        limits = self.limits if self.limits else None
        for i in picked:
            m = reach.moves[i]
            nxt = _advance(m, atoms, fluents)
            if nxt is not None and (limits is None or limits.allow(nxt[0], nxt[1])):
                yield i, nxt[0], nxt[1]


def _advance(m: Move, atoms: frozenset, fluents: dict):
    """The state after move ``m``, or None when it does not apply there."""
    if m.duration is not None and _duration_of(m.duration, fluents) is None:
        return None
    if m.plain:
        for ga in m.halves:
            if not (ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms)):
                return None
            atoms = (atoms - ga.dels) | ga.adds
        return atoms, fluents
    state = State(set(atoms), dict(fluents))
    for ga in m.halves:
        try:
            if not applicable(ga, state):
                return None
        except (Undefined, DivisionByZero):
            return None
        if apply(ga, state):
            return None  # a numeric effect could not be computed: the simulator rejects it
    return frozenset(state.atoms), state.fluents


def greedy_search(task: Task, heuristic: str = "ff", node_limit: int = 50_000, seed: int = 0,
                  separation: float | Fraction = Fraction(1, 100)) -> SearchResult:
    """Greedy best-first search from the initial state to the goal.

    ``node_limit`` bounds the states the heuristic evaluates. Ties on the heuristic
    value are broken by a random.Random seeded with ``seed``, so one seed always
    gives one plan. Never raises for a task the PDDL reader accepted: a task it
    cannot handle comes back with ``steps=None`` and the reason.
    """
    if heuristic not in HEURISTICS:
        raise ValueError(f"heuristic must be one of {', '.join(HEURISTICS)}, not {heuristic!r}")
    sep = Fraction(repr(separation)) if isinstance(separation, float) else Fraction(separation)
    timed = bool(task.domain.durative_actions)
    try:
        world = World(task)
        reach = Reachable(world)
    except TypeError as exc:  # a construct the grounding does not take (PDDL3 preferences...)
        return SearchResult(None, timed=timed, separation=sep,
                            reason=f"the search does not handle this task: {exc}")
    also = ("; left out: " + "; ".join(reach.unsupported)) if reach.unsupported else ""
    # with durative actions compressed, overlap is never tried: say so
    none = "no plan without overlapping actions exists" if timed else "no plan exists"
    if task.problem.timed_literals:
        # what timed initial literals make true is left out of the search, not planned around
        none = ("no plan found that needs no timed initial literal (the local guesser "
                "does not plan around time windows)")
    if reach.goal_blocked:
        return SearchResult(None, timed=timed, separation=sep,
                            reason=f"{none}: {reach.goal_blocked}{also}")
    search = _Search(reach, heuristic)
    rng = random.Random(f"greedy-search/{seed}")
    s0 = world.initial_state()
    atoms0, fluents0 = frozenset(s0.atoms), s0.fluents
    parent: list[int] = [-1]
    via: list[int] = [-1]
    states: list[tuple] = [(atoms0, fluents0)]

    def result(node: int, expanded: int, evaluated: int) -> SearchResult:
        moves = []
        while node > 0:
            moves.append(via[node])
            node = parent[node]
        moves.reverse()
        steps, durations = [], []
        fluents = fluents0
        atoms = atoms0
        for i in moves:
            m = reach.moves[i]
            steps.append(m.step)
            durations.append(None if m.duration is None else _duration_of(m.duration, fluents))
            atoms, fluents = _advance(m, atoms, fluents)
        return SearchResult(tuple(steps), tuple(durations), timed, "", expanded, evaluated, sep)

    if search.goal_reached(atoms0, fluents0):
        return result(0, 0, 1)
    h0 = search.evaluate(atoms0, fluents0)
    if h0 == INF:
        return SearchResult(None, timed=timed, separation=sep, evaluated=1,
                            reason=f"{none}: the goal cannot be reached even with "
                                   f"delete effects ignored{also}")
    seen = {(atoms0, search.fluent_key(fluents0))}
    fluent_keys = {id(fluents0): search.fluent_key(fluents0)}
    heap = [(h0, rng.random(), 0)]
    expanded, evaluated = 0, 1
    while heap:
        _, _, node = heapq.heappop(heap)
        atoms, fluents = states[node]
        expanded += 1
        for i, child_atoms, child_fluents in search.successors(atoms, fluents):
            fk = fluent_keys.get(id(child_fluents))
            if fk is None:
                fk = search.fluent_key(child_fluents)
            key = (child_atoms, fk)
            if key in seen:
                continue
            seen.add(key)
            states.append((child_atoms, child_fluents))
            parent.append(node)
            via.append(i)
            child = len(states) - 1
            if child_fluents is not fluents:
                fluent_keys[id(child_fluents)] = fk
            if search.goal_reached(child_atoms, child_fluents):
                return result(child, expanded, evaluated)
            if evaluated >= node_limit:
                return SearchResult(None, timed=timed, separation=sep, expanded=expanded,
                                    evaluated=evaluated,
                                    reason=f"no plan found within the node limit of "
                                           f"{node_limit} states{also}")
            evaluated += 1
            h = search.evaluate(child_atoms, child_fluents)
            if h != INF:
                heapq.heappush(heap, (h, rng.random(), child))
    return SearchResult(None, timed=timed, separation=sep, expanded=expanded, evaluated=evaluated,
                        reason=f"{none}: all {len(states)} reachable states were "
                               f"searched{also}")
