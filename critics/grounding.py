"""Turn lifted schemas into ground actions the simulator can run quickly.

A ground action keeps the plain STRIPS core as frozensets — ``pre_pos``,
``pre_neg``, ``adds``, ``dels`` — and puts everything else (numeric conditions,
disjunctions, conditional and numeric effects) into separate fields, so the
common case reads ``pre_pos <= state`` and ``(state - dels) | adds``.
Quantifiers are expanded over the task's objects here, once per distinct step,
not on every visit.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from operator import itemgetter

from plansieve.critics.model import (
    Action, Add, And, Arith, Assign, Atom, Compare, Delete, DurationRef, Equal, Exists,
    Forall, ForallEffect, FluentRef, Imply, Not, Number, Or, Param, Task, Timed, TimedEffect,
    Truth, ViolatedRef, When,
)

TRUE = Truth(True)
FALSE = Truth(False)


def exact(x: float | int) -> int | Fraction:
    """A PDDL number as an exact rational, so ``0.1 + 0.2 = 0.3`` holds as written."""
    if isinstance(x, (int, Fraction)):
        return x
    if float(x).is_integer():
        return int(x)
    return Fraction(repr(float(x)))


@dataclass(frozen=True, slots=True)
class Calc:
    """Ground arithmetic: ``op`` over ground expressions (numbers, fluent keys, Calcs)."""

    op: str
    args: tuple


@dataclass(frozen=True, slots=True)
class Conditional:
    """A ground ``when`` effect: its condition is read in the state before the step."""

    condition: object  # ground formula
    adds: frozenset
    dels: frozenset
    numeric: tuple  # ((op, fluent key, ground expr), ...)


@dataclass(slots=True, eq=False)  # not frozen: built once per distinct step, read-only after
class GroundAction:
    name: str
    args: tuple[str, ...]
    schema: Action
    pre_pos: frozenset
    pre_neg: frozenset
    pre_other: tuple  # ground formulas needing general evaluation
    adds: frozenset
    dels: frozenset
    numeric: tuple
    conditional: tuple[Conditional, ...]
    # True when the action is pure STRIPS: set algebra is all it needs.
    plain: bool


class Universe:
    """The task's objects and their types, for type checks and quantifier expansion."""

    def __init__(self, task: Task) -> None:
        domain = task.domain
        self.domain = domain
        self.objects = dict(task.objects_of())
        # every type each object belongs to, ancestors included
        ancestors: dict[str, frozenset[str]] = {}

        def up(t: str) -> frozenset[str]:
            if t not in ancestors:
                ancestors[t] = frozenset()  # guards against cycles
                out = {t, "object"}
                for parent in domain.types.get(t, ()):
                    out |= up(parent)
                ancestors[t] = frozenset(out)
            return ancestors[t]

        by_types: dict[tuple[str, ...], frozenset[str]] = {}  # objects share few type lists

        def kinds_of(ts: tuple[str, ...]) -> frozenset[str]:
            got = by_types.get(ts)
            if got is None:
                got = by_types[ts] = (frozenset().union(*(up(t) for t in ts)) if ts
                                      else frozenset({"object"}))
            return got

        self.kinds: dict[str, frozenset[str]] = {o: kinds_of(ts) for o, ts in self.objects.items()}
        self._of_types: dict[tuple[str, ...], tuple[str, ...]] = {}
        self._of_types_set: dict[tuple[str, ...], frozenset[str]] = {}

    def fits(self, obj: str, types: tuple[str, ...]) -> bool:
        kinds = self.kinds.get(obj)
        return kinds is not None and any(t in kinds for t in types)

    def of_types(self, types: tuple[str, ...]) -> tuple[str, ...]:
        """Objects of any of ``types``, in declaration order."""
        got = self._of_types.get(types)
        if got is None:
            got = tuple(o for o, k in self.kinds.items() if any(t in k for t in types))
            self._of_types[types] = got
        return got

    def of_types_set(self, types: tuple[str, ...]) -> frozenset[str]:
        """The same objects as a set, for membership tests."""
        got = self._of_types_set.get(types)
        if got is None:
            got = self._of_types_set[types] = frozenset(self.of_types(types))
        return got

    def bindings(self, params: tuple[Param, ...]):
        """Every assignment of objects to ``params`` (for quantifier expansion)."""
        combos: list[dict[str, str]] = [{}]
        for p in params:
            pool = self.of_types(p.types)
            combos = [{**c, p.name: o} for c in combos for o in pool]
        return combos


# ---------------------------------------------------------------------------
# Substitution with quantifier expansion and simplification


def _term(t: str, sub: dict[str, str]) -> str:
    return sub.get(t, t) if t.startswith("?") else t


def ground_expr(e, sub: dict[str, str]):
    if isinstance(e, Number):
        return exact(e.value)
    if isinstance(e, FluentRef):
        return (e.function, *(_term(a, sub) for a in e.args))
    if isinstance(e, Arith):
        return Calc(e.op, tuple(ground_expr(a, sub) for a in e.args))
    if isinstance(e, (DurationRef, ViolatedRef)):
        return e
    raise TypeError(f"not an expression: {e!r}")


def ground_formula(f, sub: dict[str, str], universe: Universe):
    """Substitute, expand quantifiers, resolve equality; returns a simplified ground formula.

    Atoms become ``Atom`` with ground args; comparisons keep ``Compare`` with ground
    expression tuples (see :func:`ground_expr`).
    """
    if isinstance(f, Atom):
        return Atom(f.predicate, tuple(_term(a, sub) for a in f.args))
    if isinstance(f, Truth):
        return f
    if isinstance(f, Equal):  # kept (not folded) so a failed one still reads as written
        return Equal(_term(f.left, sub), _term(f.right, sub))
    if isinstance(f, Not):
        body = ground_formula(f.body, sub, universe)
        if isinstance(body, Truth):
            return FALSE if body.value else TRUE
        if isinstance(body, Not):
            return body.body
        return Not(body)
    if isinstance(f, And):
        return _conj([ground_formula(p, sub, universe) for p in f.parts])
    if isinstance(f, Or):
        return _disj([ground_formula(p, sub, universe) for p in f.parts])
    if isinstance(f, Imply):
        return _disj([ground_formula(Not(f.condition), sub, universe),
                      ground_formula(f.then, sub, universe)])
    if isinstance(f, Forall):
        return _conj([ground_formula(f.body, {**sub, **b}, universe)
                      for b in universe.bindings(f.params)])
    if isinstance(f, Exists):
        return _disj([ground_formula(f.body, {**sub, **b}, universe)
                      for b in universe.bindings(f.params)])
    if isinstance(f, Compare):
        return Compare(f.op, ground_expr(f.left, sub), ground_expr(f.right, sub))
    if isinstance(f, Timed):
        return Timed(f.when, ground_formula(f.body, sub, universe))
    raise TypeError(f"cannot ground {type(f).__name__} here")


def _conj(parts: list):
    out = []
    for p in parts:
        if isinstance(p, Truth):
            if not p.value:
                return FALSE
            continue
        out.extend(p.parts if isinstance(p, And) else (p,))
    return out[0] if len(out) == 1 else (And(tuple(out)) if out else TRUE)


def _disj(parts: list):
    out = []
    for p in parts:
        if isinstance(p, Truth):
            if p.value:
                return TRUE
            continue
        out.extend(p.parts if isinstance(p, Or) else (p,))
    return out[0] if len(out) == 1 else (Or(tuple(out)) if out else FALSE)


def conjuncts(f) -> tuple:
    """The top-level parts of a ground formula that must all hold."""
    if f is None or f == TRUE:
        return ()
    return f.parts if isinstance(f, And) else (f,)


# ---------------------------------------------------------------------------
# Effects


def _ground_effects(effects, sub, universe, adds, dels, numeric, conditional):
    for e in effects:
        if isinstance(e, Add):
            adds.add((e.atom.predicate, *(_term(a, sub) for a in e.atom.args)))
        elif isinstance(e, Delete):
            dels.add((e.atom.predicate, *(_term(a, sub) for a in e.atom.args)))
        elif isinstance(e, Assign):
            numeric.append((e.op, ground_expr(e.fluent, sub), ground_expr(e.value, sub)))
        elif isinstance(e, ForallEffect):
            for b in universe.bindings(e.params):
                _ground_effects(e.effects, {**sub, **b}, universe, adds, dels, numeric,
                                conditional)
        elif isinstance(e, When):
            cond = ground_formula(e.condition, sub, universe)
            if cond == FALSE:
                continue
            c_adds: set = set()
            c_dels: set = set()
            c_num: list = []
            nested: list = []
            _ground_effects(e.effects, sub, universe, c_adds, c_dels, c_num, nested)
            if cond == TRUE:
                adds |= c_adds
                dels |= c_dels
                numeric.extend(c_num)
                conditional.extend(nested)
            else:
                conditional.append(Conditional(cond, frozenset(c_adds), frozenset(c_dels),
                                               tuple(c_num)))
                # a when inside a when: both conditions must hold
                for n in nested:
                    conditional.append(Conditional(_conj([cond, n.condition]), n.adds, n.dels,
                                                   n.numeric))
        elif isinstance(e, TimedEffect):
            raise TypeError("timed effects belong to durative actions")
        else:
            raise TypeError(f"not an effect: {e!r}")


@dataclass(frozen=True, slots=True)
class Template:
    """A schema compiled once: its literal preconditions and add/delete effects as
    ``(predicate, how, pick)`` triples that say how to take the atom's arguments from
    the step's (no arguments, one parameter index, an itemgetter over several, or a
    tuple mixing indexes and constants), so grounding them is index lookups. What is not a plain literal
    (numeric, quantified, disjunctive, conditional, numeric effects) stays lifted in
    ``other_pre`` and ``other_effects`` and goes through the general grounding."""

    pos: tuple
    neg: tuple
    adds: tuple
    dels: tuple
    other_pre: tuple
    other_effects: tuple


def _flat_conjuncts(f):
    if f is None:
        return
    if isinstance(f, And):
        for p in f.parts:
            yield from _flat_conjuncts(p)
    elif not (isinstance(f, Truth) and f.value):
        yield f


def compile_schema(schema: Action) -> Template:
    index = {p.name: i for i, p in enumerate(schema.params)}

    def spec(atom: Atom):
        out = []
        for a in atom.args:
            if a.startswith("?"):
                if a not in index:
                    return None  # bound by a quantifier: not a plain literal
                out.append(index[a])
            else:
                out.append(a)
        if not all(isinstance(i, int) for i in out):
            return (atom.predicate, _MIXED, tuple(out))
        if len(out) == 0:
            return (atom.predicate, _NONE, None)
        if len(out) == 1:
            return (atom.predicate, _ONE, out[0])
        return (atom.predicate, _MANY, itemgetter(*out))

    pos, neg, other_pre = [], [], []
    for c in _flat_conjuncts(schema.precondition):
        if isinstance(c, Atom) and (sp := spec(c)) is not None:
            pos.append(sp)
        elif isinstance(c, Not) and isinstance(c.body, Atom) and (sp := spec(c.body)) is not None:
            neg.append(sp)
        else:
            other_pre.append(c)
    adds, dels, other_effects = [], [], []
    for e in schema.effects:
        if isinstance(e, Add) and (sp := spec(e.atom)) is not None:
            adds.append(sp)
        elif isinstance(e, Delete) and (sp := spec(e.atom)) is not None:
            dels.append(sp)
        else:
            other_effects.append(e)
    return Template(tuple(pos), tuple(neg), tuple(adds), tuple(dels), tuple(other_pre),
                    tuple(other_effects))


_NONE, _ONE, _MANY, _MIXED = range(4)


def _instances(pairs: tuple, args: tuple[str, ...]) -> frozenset:
    out = []
    for pred, how, pick in pairs:
        if how == _ONE:
            out.append((pred, args[pick]))
        elif how == _MANY:
            out.append((pred, *pick(args)))
        elif how == _NONE:
            out.append((pred,))
        else:  # _MIXED: parameters and constants
            out.append((pred, *[args[i] if i.__class__ is int else i for i in pick]))
    return frozenset(out)


def ground_action(schema: Action, args: tuple[str, ...], universe: Universe,
                  template: Template | None = None) -> GroundAction:
    """Compile one instantiation of ``schema``; arity and types are checked by the caller."""
    t = template or compile_schema(schema)
    pos, neg = _instances(t.pos, args), _instances(t.neg, args)
    adds, dels = _instances(t.adds, args), _instances(t.dels, args)
    other: list = []
    numeric: list = []
    conditional: list = []
    if t.other_pre or t.other_effects:
        sub = {p.name: a for p, a in zip(schema.params, args)}
        more_pos, more_neg = set(), set()
        for c in conjuncts(ground_formula(And(t.other_pre), sub, universe)):
            if isinstance(c, Atom):
                more_pos.add(c.key)
            elif isinstance(c, Not) and isinstance(c.body, Atom):
                more_neg.add(c.body.key)
            else:
                other.append(c)  # includes FALSE, which never holds
        more_adds, more_dels = set(), set()
        _ground_effects(t.other_effects, sub, universe, more_adds, more_dels, numeric,
                        conditional)
        pos, neg = pos | more_pos, neg | more_neg
        adds, dels = adds | more_adds, dels | more_dels
    return GroundAction(schema.name, args, schema, pos, neg, tuple(other), adds, dels,
                        tuple(numeric), tuple(conditional), not (other or numeric or conditional))
