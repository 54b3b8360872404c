"""The immutable PDDL model every critic shares.

Names are lower-cased when read (PDDL is case-insensitive). A term is a plain
string: variables start with ``?``, anything else is an object or constant.
Ground atoms in a state are plain tuples ``("on", "a", "b")`` so the simulator's
inner loop stays in fast built-in types; the classes here describe the schema
side (formulas, effects, actions) and carry a source location for messages.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, TypeVar, Union

if TYPE_CHECKING:
    from plansieve.critics.limits import Limits

K = TypeVar("K")
V = TypeVar("V")

GroundAtom = tuple  # ("pred", "arg1", ...)
FluentKey = tuple  # ("function", "arg1", ...)


class FrozenMap(Mapping[K, V]):
    """A read-only, hashable, picklable mapping that keeps insertion order."""

    __slots__ = ("_d", "_h")

    def __init__(self, items: Mapping[K, V] | Iterable[tuple[K, V]] = ()) -> None:
        self._d: dict[K, V] = dict(items)
        self._h: int | None = None

    def __getitem__(self, key: K) -> V:
        return self._d[key]

    def __iter__(self) -> Iterator[K]:
        return iter(self._d)

    def __len__(self) -> int:
        return len(self._d)

    def __contains__(self, key: object) -> bool:
        return key in self._d

    def __hash__(self) -> int:
        if self._h is None:
            self._h = hash(tuple(self._d.items()))
        return self._h

    def __eq__(self, other: object) -> bool:
        if isinstance(other, FrozenMap):
            return self._d == other._d
        if isinstance(other, Mapping):
            return self._d == dict(other)
        return NotImplemented

    def __repr__(self) -> str:
        return f"FrozenMap({self._d!r})"

    def __reduce__(self) -> tuple[Any, ...]:
        return (FrozenMap, (list(self._d.items()),))


@dataclass(frozen=True, slots=True)
class Loc:
    """Where a node was written: 1-based line and column in its source file."""

    line: int
    column: int


@dataclass(frozen=True, slots=True)
class Source:
    """The file a domain or problem was read from, kept for error messages."""

    filename: str
    text: str = field(repr=False)


def _loc() -> Any:
    return field(default=None, compare=False, repr=False)


# ---------------------------------------------------------------------------
# Typed names


@dataclass(frozen=True, slots=True)
class Param:
    """A typed variable or object name; ``types`` has several entries for ``either``."""

    name: str
    types: tuple[str, ...] = ("object",)
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Signature:
    """A predicate or function declaration. ``result`` is "number" for functions."""

    name: str
    params: tuple[Param, ...]
    result: str | None = None
    loc: Loc | None = _loc()


# ---------------------------------------------------------------------------
# Numeric expressions


@dataclass(frozen=True, slots=True)
class Number:
    value: float
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class FluentRef:
    """A function term such as ``(fuel ?v)``; ``total-time`` is a FluentRef too."""

    function: str
    args: tuple[str, ...] = ()
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Arith:
    """``op`` is one of ``+ - * /``; ``-`` with one argument is negation."""

    op: str
    args: tuple["Expr", ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class DurationRef:
    """``?duration`` inside a durative action."""

    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class ViolatedRef:
    """``(is-violated pref)`` in a metric (PDDL3)."""

    preference: str
    loc: Loc | None = _loc()


Expr = Union[Number, FluentRef, Arith, DurationRef, ViolatedRef]


# ---------------------------------------------------------------------------
# Formulas (goal descriptions)


@dataclass(frozen=True, slots=True)
class Atom:
    predicate: str
    args: tuple[str, ...] = ()
    loc: Loc | None = _loc()

    @property
    def key(self) -> GroundAtom:
        return (self.predicate, *self.args)


@dataclass(frozen=True, slots=True)
class Truth:
    """A constant formula, from an empty ``(and)`` or a resolved equality."""

    value: bool
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Equal:
    """``(= t1 t2)`` between terms (the :equality requirement)."""

    left: str
    right: str
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Not:
    body: "Formula"
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class And:
    parts: tuple["Formula", ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Or:
    parts: tuple["Formula", ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Imply:
    condition: "Formula"
    then: "Formula"
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Exists:
    params: tuple[Param, ...]
    body: "Formula"
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Forall:
    params: tuple[Param, ...]
    body: "Formula"
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Compare:
    """A numeric comparison; ``op`` is one of ``< <= = >= >``."""

    op: str
    left: Expr
    right: Expr
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Timed:
    """A durative-action condition: ``when`` is "start", "end" or "all" (over all)."""

    when: str
    body: "Formula"
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Preference:
    """A PDDL3 ``(preference name φ)``; kept, not judged by the plan simulator."""

    name: str | None
    body: "Formula"
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Trajectory:
    """A PDDL3 modal constraint.

    ``op`` is one of: always, sometime, at-most-once, sometime-after,
    sometime-before, within, always-within, hold-during, hold-after, at-end.
    ``times`` holds the numbers that come first in the written form (in order),
    ``formulas`` the formulas after them.
    """

    op: str
    formulas: tuple["Formula", ...]
    times: tuple[float, ...] = ()
    loc: Loc | None = _loc()


Formula = Union[Atom, Truth, Equal, Not, And, Or, Imply, Exists, Forall, Compare, Timed,
                Preference, Trajectory]


# ---------------------------------------------------------------------------
# Effects


@dataclass(frozen=True, slots=True)
class Add:
    atom: Atom
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Delete:
    atom: Atom
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Assign:
    """A numeric effect; ``op`` is assign, increase, decrease, scale-up or scale-down."""

    op: str
    fluent: FluentRef
    value: Expr
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class When:
    condition: Formula
    effects: tuple["Effect", ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class ForallEffect:
    params: tuple[Param, ...]
    effects: tuple["Effect", ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class TimedEffect:
    """A durative-action effect: ``when`` is "start" or "end"."""

    when: str
    effect: "Effect"
    loc: Loc | None = _loc()


Effect = Union[Add, Delete, Assign, When, ForallEffect, TimedEffect]


# ---------------------------------------------------------------------------
# Actions, domain, problem


@dataclass(frozen=True, slots=True)
class Action:
    name: str
    params: tuple[Param, ...]
    precondition: Formula | None
    effects: tuple[Effect, ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class DurationConstraint:
    """``(op ?duration value)``; ``when`` is None, "start" or "end"."""

    op: str
    value: Expr
    when: str | None = None
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class DurativeAction:
    name: str
    params: tuple[Param, ...]
    duration: tuple[DurationConstraint, ...]
    condition: Formula | None
    effects: tuple[Effect, ...]
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Domain:
    name: str
    requirements: frozenset[str]
    # type name -> its parent types (``object`` has none); every declared type is a key.
    types: FrozenMap[str, tuple[str, ...]]
    constants: FrozenMap[str, tuple[str, ...]]
    predicates: FrozenMap[str, Signature]
    functions: FrozenMap[str, Signature]
    actions: FrozenMap[str, Action]
    durative_actions: FrozenMap[str, DurativeAction] = field(default_factory=FrozenMap)
    constraints: Formula | None = None
    source: Source | None = field(default=None, compare=False, repr=False)

    def is_subtype(self, child: str, parent: str) -> bool:
        """True when ``child`` is ``parent`` or one of its descendants."""
        return is_subtype(self.types, child, parent)


def is_subtype(parents: Mapping[str, tuple[str, ...]], child: str, parent: str) -> bool:
    """True when ``child`` reaches ``parent`` through ``parents`` (type -> its parent types)."""
    if child == parent or parent == "object":
        return True
    seen, todo = set(), [child]
    while todo:
        t = todo.pop()
        if t == parent:
            return True
        if t not in seen:
            seen.add(t)
            todo.extend(parents.get(t, ()))
    return False


@dataclass(frozen=True, slots=True)
class TimedLiteral:
    """A PDDL 2.2 timed initial literal: ``(at time effect)`` in the init section."""

    time: float
    effect: Add | Delete | Assign
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Metric:
    direction: str  # "minimize" or "maximize"
    expr: Expr
    loc: Loc | None = _loc()


@dataclass(frozen=True, slots=True)
class Problem:
    name: str
    domain_name: str
    objects: FrozenMap[str, tuple[str, ...]]
    init: frozenset[GroundAtom]
    init_fluents: FrozenMap[FluentKey, float]
    goal: Formula | None
    timed_literals: tuple[TimedLiteral, ...] = ()
    constraints: Formula | None = None
    metric: Metric | None = None
    source: Source | None = field(default=None, compare=False, repr=False)


@dataclass(frozen=True, slots=True)
class Task:
    """What a critic judges a plan against: a domain, one of its problems, and limits.

    ``limits`` (resource bounds, deadlines, time settings; see
    :mod:`plansieve.critics.limits`) come from a limits file beside the PDDL.
    """

    domain: Domain
    problem: Problem
    limits: "Limits | None" = None

    def objects_of(self) -> FrozenMap[str, tuple[str, ...]]:
        """Every object and constant with its declared types."""
        merged = dict(self.domain.constants)
        merged.update(self.problem.objects)
        return FrozenMap(merged)
