"""Turn what the PDDL grammar recognises into the model of ``critics/model.py``.

The transformer runs inside the LALR parser (no parse tree is built), so every
callback gets the children of one rule and returns a model node. Locations come
from the kept ``(`` token of each node. A domain or problem comes out as a
*draft*: its declarations stay in lists, in file order, so that duplicates and
undeclared names can be reported by ``critics/semantics.py`` before the
read-only model is assembled. Nothing here judges meaning; only shapes the
grammar cannot express (a ``- type`` with no names before it) stop the read.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from lark import Token, Transformer

from plansieve.critics.model import (
    Action, Add, And, Arith, Assign, Atom, Compare, Delete, Domain, DurationConstraint,
    DurationRef, DurativeAction, Effect, Equal, Exists, FluentRef, Forall, ForallEffect, Formula,
    FrozenMap, Imply, Loc, Metric, Not, Number, Or, Param, Preference, Problem, Signature, Source,
    Timed, TimedEffect, TimedLiteral, Trajectory, ViolatedRef, When,
)


class ShapeError(Exception):
    """A construct the grammar accepts but that cannot mean anything (reported as syntax)."""

    def __init__(self, message: str, line: int, column: int) -> None:
        super().__init__(message)
        self.message, self.line, self.column = message, line, column


class UnsupportedFeature(Exception):
    """A construct that belongs to a PDDL requirement plansieve does not implement."""

    def __init__(self, requirement: str, what: str, line: int, column: int) -> None:
        super().__init__(what)
        self.requirement, self.what, self.line, self.column = requirement, what, line, column


# ---------------------------------------------------------------------------
# Drafts: declarations in file order, before duplicates are resolved.


class InitFact:
    """One ground fact of ``:init``; ``line``/``column`` point at its ``(``."""

    __slots__ = ("key", "line", "column")

    def __init__(self, key: tuple, line: int | None, column: int | None) -> None:
        self.key, self.line, self.column = key, line, column

    @property
    def loc(self) -> Loc | None:
        return Loc(self.line, self.column) if self.line is not None else None


class InitValue:
    """One ``(= (f args) value)`` of ``:init``; the head position is kept for messages."""

    __slots__ = ("key", "value", "line", "column", "head_line", "head_column")

    def __init__(self, key: tuple, value: float, line: int | None, column: int | None,
                 head_line: int | None, head_column: int | None) -> None:
        self.key, self.value = key, value
        self.line, self.column = line, column
        self.head_line, self.head_column = head_line, head_column

    @property
    def loc(self) -> Loc | None:
        return Loc(self.line, self.column) if self.line is not None else None

    @property
    def head_loc(self) -> Loc | None:
        return Loc(self.head_line, self.head_column) if self.head_line is not None else None


class InitNot:
    """``(not fact)``: only meaningful inside a timed initial literal."""

    __slots__ = ("fact", "line", "column")

    def __init__(self, fact: InitFact, line: int, column: int) -> None:
        self.fact, self.line, self.column = fact, line, column


@dataclass
class Unsupported:
    """A section or construct that needs a requirement we do not implement."""

    requirement: str
    what: str
    loc: Loc


@dataclass
class Section:
    kind: str  # the section keyword without its colon: "predicates", "init", ...
    loc: Loc
    content: object = None


@dataclass
class DomainDraft:
    name: str
    name_loc: Loc
    loc: Loc
    sections: list[Section] = field(default_factory=list)
    requirements: list[tuple[str, Loc]] = field(default_factory=list)
    types: list[Param] = field(default_factory=list)  # Param.types = declared parents
    constants: list[Param] = field(default_factory=list)
    predicates: list[Signature] = field(default_factory=list)
    functions: list[Signature] = field(default_factory=list)
    actions: list[Action | DurativeAction] = field(default_factory=list)
    constraints: Formula | None = None
    unsupported: list[Unsupported] = field(default_factory=list)

    def build(self, source: Source | None) -> Domain:
        """The read-only domain; for a repeated name the first declaration wins."""
        types: dict[str, tuple[str, ...]] = {"object": ()}
        for t in self.types:
            if t.name != "object":
                types.setdefault(t.name, t.types)
        # A parent named only after a '-' is a type too, directly under object
        # (common practice: mature PDDL readers accept `(:types truck - vehicle)`
        # without a separate declaration of `vehicle`).
        for t in self.types:
            for parent in t.types:
                types.setdefault(parent, ("object",) if parent != "object" else ())
        constants: dict[str, tuple[str, ...]] = {}
        for c in self.constants:
            constants.setdefault(c.name, c.types)
        predicates: dict[str, Signature] = {}
        for p in self.predicates:
            predicates.setdefault(p.name, p)
        functions: dict[str, Signature] = {}
        for f in self.functions:
            functions.setdefault(f.name, f)
        actions: dict[str, Action] = {}
        durative: dict[str, DurativeAction] = {}
        for a in self.actions:
            if a.name in actions or a.name in durative:
                continue
            (durative if isinstance(a, DurativeAction) else actions)[a.name] = a
        return Domain(
            name=self.name,
            requirements=frozenset(r for r, _ in self.requirements),
            types=FrozenMap(types),
            constants=FrozenMap(constants),
            predicates=FrozenMap(predicates),
            functions=FrozenMap(functions),
            actions=FrozenMap(actions),
            durative_actions=FrozenMap(durative),
            constraints=self.constraints,
            source=source,
        )


@dataclass
class ProblemDraft:
    name: str
    name_loc: Loc
    loc: Loc
    sections: list[Section] = field(default_factory=list)
    domain_name: str | None = None
    domain_name_loc: Loc | None = None
    requirements: list[tuple[str, Loc]] = field(default_factory=list)
    objects: list[Param] = field(default_factory=list)
    init: list = field(default_factory=list)  # InitFact | InitValue | TimedLiteral
    goal: Formula | None = None
    constraints: Formula | None = None
    metric: Metric | None = None

    def build(self, source: Source | None) -> Problem:
        """The read-only problem; for a repeated object or fluent the first one wins."""
        objects: dict[str, tuple[str, ...]] = {}
        for o in self.objects:
            objects.setdefault(o.name, o.types)
        facts = []
        values: dict[tuple, float] = {}
        tils = []
        for el in self.init:
            if type(el) is InitFact:
                facts.append(el.key)
            elif type(el) is InitValue:
                values.setdefault(el.key, el.value)
            else:
                tils.append(el)
        return Problem(
            name=self.name,
            domain_name=self.domain_name or "",
            objects=FrozenMap(objects),
            init=frozenset(facts),
            init_fluents=FrozenMap(values),
            goal=self.goal,
            timed_literals=tuple(tils),
            constraints=self.constraints,
            metric=self.metric,
            source=source,
        )


# ---------------------------------------------------------------------------
# Helpers


def _loc(tok: Token) -> Loc:
    return Loc(tok.line, tok.column)


def _offset_position(tok: Token, offset: int) -> tuple[int, int]:
    """Line and column of character ``offset`` inside a (possibly multi-line) token."""
    newlines = tok.count("\n", 0, offset)
    if not newlines:
        return tok.line, tok.column + offset
    return tok.line + newlines, offset - tok.rfind("\n", 0, offset)


@dataclass
class _DashType:
    """``- type`` inside a typed list: the types, and where the type was written."""

    types: tuple[str, ...]
    line: int
    column: int


@dataclass
class _TimedParts:
    """The parts of a durative condition, each a Timed node, and where it opened."""

    parts: list[Formula]
    loc: Loc


def _group_typed(items: list) -> list[Param]:
    """Give each run of names the type that follows it; a trailing run is ``object``.

    ``items`` holds ``(name, line, column)`` triples and ``_DashType`` markers.
    """
    out: list[Param] = []
    pending: list[tuple[str, int, int]] = []
    for it in items:
        if type(it) is _DashType:
            if not pending:
                raise ShapeError("a '- type' must follow the names it types, but no name "
                                 "comes before it", it.line, it.column)
            types = it.types
            out.extend([Param(n, types, Loc(line, column)) for n, line, column in pending])
            pending = []
        else:
            pending.append(it)
    out.extend([Param(n, ("object",), Loc(line, column)) for n, line, column in pending])
    return out


_WORD = re.compile(r"[^ \t\r]+")


def _run_names(tok: Token) -> list[tuple[str, int, int]]:
    """The names of a NAME_RUN token (names with only blanks between), each with its place."""
    out = []
    line, base = tok.line, tok.column  # where the current line's part of the token starts
    for k, text in enumerate(tok.split("\n")):
        if k:
            line, base = line + 1, 1
        for m in _WORD.finditer(text):
            out.append((m.group(), line, base + m.start()))
    return out


def _number(tok: Token) -> float:
    return float(tok)


def _split_by_time(timed: list[TimedEffect]) -> dict[str, list[Effect]]:
    """Inner effects grouped by ``start``/``end``, in order of first appearance."""
    groups: dict[str, list[Effect]] = {}
    for te in timed:
        groups.setdefault(te.when, []).append(te.effect)
    return groups


def _plain_atom(tok: Token) -> Atom:
    """An atom read as one PLAIN_ATOM token (leading blanks included)."""
    start = tok.index("(")
    line, column = _offset_position(tok, start) if start else (tok.line, tok.column)
    words = tok[start + 1:-1].split()
    return Atom(words[0], tuple(words[1:]), Loc(line, column))


def _ground(tok: Token) -> InitFact | InitValue:
    """A whole fact read as one GROUND_ATOM or GROUND_VALUE token (leading blanks included)."""
    start = tok.index("(")
    line, column = _offset_position(tok, start) if start else (tok.line, tok.column)
    if tok.type == "GROUND_ATOM":
        return InitFact(tuple(tok[start + 1:-1].split()), line, column)
    i = tok.index("(", start + 1)
    j = tok.index(")", i)
    hl, hc = _offset_position(tok, i)
    return InitValue(tuple(tok[i + 1:j].split()), float(tok[j + 1:-1]), line, column, hl, hc)


_TRAJECTORY = {
    "con_always": ("always", 0), "con_sometime": ("sometime", 0),
    "con_within": ("within", 1), "con_at_most_once": ("at-most-once", 0),
    "con_sometime_after": ("sometime-after", 0), "con_sometime_before": ("sometime-before", 0),
    "con_always_within": ("always-within", 1), "con_hold_during": ("hold-during", 2),
    "con_hold_after": ("hold-after", 1),
}


class PddlTransformer(Transformer):
    """Callbacks for the LALR parser, one per grammar rule. Stateless: safe to share."""

    # -- typed lists -------------------------------------------------------

    def type(self, c):
        t = c[0]
        return (str(t),), t

    def either_type(self, c):
        return tuple(str(t) for t in c[1:]), c[0]

    def dash_type(self, c):
        types, tok = c[0]
        return _DashType(types, tok.line, tok.column)

    def name_items(self, c):
        items = c[0] if len(c) == 2 else []
        it = c[-1]
        if type(it) is Token:  # NAME_RUN
            items.extend(_run_names(it))
        else:
            items.append(it)
        return items

    def variable_items(self, c):
        items = c[0] if len(c) == 2 else []
        it = c[-1]
        items.append((str(it), it.line, it.column) if type(it) is Token else it)
        return items

    def init_items(self, c):
        item = c[-1]
        if type(item) is Token:
            item = _ground(item)
        if len(c) == 2:
            c[0].append(item)
            return c[0]
        return [item]

    def typed_names(self, c):
        return _group_typed(c[0]) if c else []

    typed_vars = typed_names

    # -- domain ------------------------------------------------------------

    def domain_name(self, c):
        return str(c[1]), _loc(c[1])

    def requirements(self, c):
        return Section("requirements", _loc(c[0]), [(str(t), _loc(t)) for t in c[1:]])

    def types_section(self, c):
        return Section("types", _loc(c[0]), c[1])

    def constants_section(self, c):
        return Section("constants", _loc(c[0]), c[1])

    def predicate_decl(self, c):
        return Signature(str(c[1]), tuple(c[2]), None, _loc(c[0]))

    def predicates_section(self, c):
        return Section("predicates", _loc(c[0]), c[1:])

    def function_decl(self, c):
        return Signature(str(c[1]), tuple(c[2]), "number", _loc(c[0]))

    def functions_section(self, c):
        out: list[Signature] = []
        pending: list[Signature] = []
        for it in c[1:]:
            if isinstance(it, _DashType):
                if not pending:
                    raise ShapeError("a '- type' must follow the functions it types, but no "
                                     "function comes before it", it.line, it.column)
                result = it.types[0] if len(it.types) == 1 else "either"
                out.extend(Signature(s.name, s.params, result, s.loc) for s in pending)
                pending = []
            else:
                pending.append(it)
        out.extend(pending)
        return Section("functions", _loc(c[0]), out)

    def constraints_section(self, c):
        return Section("constraints", _loc(c[0]), c[1])

    def sexp(self, c):
        return None

    def unsupported_section(self, c):
        kw = str(c[1])
        req, what = {
            ":derived": (":derived-predicates", "derived predicates (:derived)"),
            ":process": (":time", "processes (PDDL+ :process)"),
            ":event": (":time", "events (PDDL+ :event)"),
        }[kw]
        return Unsupported(req, what, _loc(c[0]))

    def domain(self, c):
        name, name_loc = c[1]
        d = DomainDraft(name, name_loc, _loc(c[0]))
        for it in c[2:]:
            if isinstance(it, Unsupported):
                d.unsupported.append(it)
                continue
            if isinstance(it, (Action, DurativeAction)):
                d.actions.append(it)
                continue
            d.sections.append(it)
            if it.kind == "requirements":
                d.requirements.extend(it.content)
            elif it.kind == "types":
                d.types.extend(it.content)
            elif it.kind == "constants":
                d.constants.extend(it.content)
            elif it.kind == "predicates":
                d.predicates.extend(it.content)
            elif it.kind == "functions":
                d.functions.extend(it.content)
            elif it.kind == "constraints" and d.constraints is None:
                d.constraints = it.content
        return d

    # -- actions -----------------------------------------------------------

    def parameters(self, c):
        return ("parameters", tuple(c[1]))

    def precondition(self, c):
        return ("precondition", c[0])

    def effect_part(self, c):
        return ("effect", tuple(c[0]))

    def action(self, c):
        parts = dict(c[2:])
        return Action(str(c[1]), parts.get("parameters", ()), parts.get("precondition"),
                      parts.get("effect", ()), _loc(c[0]))

    def duration(self, c):
        spec = c[0]
        if isinstance(spec, DurationConstraint):
            return ("duration", (spec,))
        if isinstance(spec, And):  # `()`
            return ("duration", ())
        return ("duration", tuple(spec))

    def duration_and(self, c):
        return c[1:]

    def duration_constraint(self, c):
        return DurationConstraint(str(c[1]), c[3], None, _loc(c[0]))

    def timed_duration(self, c):
        inner = c[2]
        return DurationConstraint(inner.op, inner.value, str(c[1]), _loc(c[0]))

    def condition(self, c):
        body = c[0]
        if isinstance(body, _TimedParts):
            return ("condition", And(tuple(body.parts), body.loc))
        return ("condition", And((), body.loc))  # `()`

    def da_effect_part(self, c):
        return ("effect", tuple(c[0]))

    def durative_action(self, c):
        parts = dict(c[2:])
        return DurativeAction(str(c[1]), parts.get("parameters", ()), parts.get("duration", ()),
                              parts.get("condition"), parts.get("effect", ()), _loc(c[0]))

    # -- goal descriptions -------------------------------------------------

    def atom(self, c):
        return Atom(str(c[1]), tuple(str(t) for t in c[2:]), _loc(c[0]))

    def plain_atom(self, c):
        return _plain_atom(c[0])

    def and_f(self, c):
        return And(tuple(c[1:]), _loc(c[0]))

    def or_f(self, c):
        return Or(tuple(c[1:]), _loc(c[0]))

    def not_f(self, c):
        return Not(c[1], _loc(c[0]))

    def imply_f(self, c):
        return Imply(c[1], c[2], _loc(c[0]))

    def exists_f(self, c):
        return Exists(tuple(c[2]), c[3], _loc(c[0]))

    def forall_f(self, c):
        return Forall(tuple(c[2]), c[3], _loc(c[0]))

    def equal_f(self, c):
        return Equal(str(c[1]), str(c[2]), _loc(c[0]))

    def compare_f(self, c):
        return Compare(str(c[1]), c[2], c[3], _loc(c[0]))

    def preference_f(self, c):
        name = str(c[1]) if len(c) == 3 else None
        return Preference(name, c[-1], _loc(c[0]))

    def empty_formula(self, c):
        return And((), _loc(c[0]))

    # -- durative conditions: each callback returns every part as a Timed node

    def timed_gd(self, c):
        when = "all" if c[1] == "all" else str(c[1])
        return _TimedParts([Timed(when, c[2], _loc(c[0]))], _loc(c[0]))

    def da_and(self, c):
        parts: list[Formula] = []
        for it in c[1:]:
            if isinstance(it, _TimedParts):
                parts.extend(it.parts)
        return _TimedParts(parts, _loc(c[0]))

    def da_forall(self, c):
        params, body, loc = tuple(c[2]), c[3], _loc(c[0])
        parts = body.parts if isinstance(body, _TimedParts) else []
        # A universal quantifier distributes over the conjunction of timed parts.
        return _TimedParts([Timed(t.when, Forall(params, t.body, loc), t.loc) for t in parts], loc)

    def da_preference(self, c):
        name = str(c[1]) if len(c) == 3 else None
        t = c[-1].parts[0]
        loc = _loc(c[0])
        return _TimedParts([Timed(t.when, Preference(name, t.body, loc), t.loc)], loc)

    # -- effects: each callback returns a list, so `and` flattens -----------

    def add_e(self, c):
        loc = _loc(c[0])
        return [Add(Atom(str(c[1]), tuple(str(t) for t in c[2:]), loc), loc)]

    def plain_add(self, c):
        atom = _plain_atom(c[0])
        return [Add(atom, atom.loc)]

    def not_e(self, c):
        add = c[1][0]
        return [Delete(add.atom, _loc(c[0]))]

    def and_e(self, c):
        out: list[Effect] = []
        for part in c[1:]:
            out.extend(part)
        return out

    def forall_e(self, c):
        return [ForallEffect(tuple(c[2]), tuple(c[3]), _loc(c[0]))]

    def when_e(self, c):
        return [When(c[1], tuple(c[2]), _loc(c[0]))]

    def assign_e(self, c):
        return [Assign(str(c[1]), c[2], c[3], _loc(c[0]))]

    def empty_effect(self, c):
        return []

    # -- durative effects: each callback returns a list of TimedEffect ------

    def timed_e(self, c):
        loc = _loc(c[0])
        return [TimedEffect(str(c[1]), e, loc) for e in c[2]]

    da_and_e = and_e

    def da_forall_e(self, c):
        params, loc = tuple(c[2]), _loc(c[0])
        return [TimedEffect(when, ForallEffect(params, tuple(effs), loc), loc)
                for when, effs in _split_by_time(c[3]).items()]

    def da_when_e(self, c):
        loc = _loc(c[0])
        cond = c[1]
        cond = And(tuple(cond.parts), cond.loc) if isinstance(cond, _TimedParts) else cond
        return [TimedEffect(when, When(cond, tuple(effs), loc), loc)
                for when, effs in _split_by_time(c[2]).items()]

    def continuous_e(self, c):
        raise UnsupportedFeature(":continuous-effects",
                                 "a continuous effect (a numeric effect outside 'at start' or "
                                 "'at end')", c[0].line, c[0].column)

    # -- numeric expressions ------------------------------------------------

    def number(self, c):
        return Number(_number(c[0]), _loc(c[0]))

    def f_head(self, c):
        return FluentRef(str(c[1]), tuple(str(t) for t in c[2:]), _loc(c[0]))

    def bare_function(self, c):
        return FluentRef(str(c[0]), (), _loc(c[0]))

    def add_x(self, c):
        return Arith("+", tuple(c[1:]), _loc(c[0]))

    def mul_x(self, c):
        return Arith("*", tuple(c[1:]), _loc(c[0]))

    def sub_x(self, c):
        return Arith("-", tuple(c[1:]), _loc(c[0]))

    neg_x = sub_x

    def div_x(self, c):
        return Arith("/", tuple(c[1:]), _loc(c[0]))

    def duration_ref(self, c):
        return DurationRef(_loc(c[0]))

    def continuous_time(self, c):
        raise UnsupportedFeature(":continuous-effects", "the continuous time variable #t",
                                 c[0].line, c[0].column)

    def violated_ref(self, c):
        return ViolatedRef(str(c[1]), _loc(c[0]))

    # -- problem -------------------------------------------------------------

    def problem_name(self, c):
        return str(c[1]), _loc(c[1])

    def problem_domain(self, c):
        return Section("domain", _loc(c[0]), (str(c[1]), _loc(c[1])))

    def objects_section(self, c):
        return Section("objects", _loc(c[0]), c[1])

    def init_section(self, c):
        return Section("init", _loc(c[0]), c[1] if len(c) == 2 else [])

    def goal_section(self, c):
        return Section("goal", _loc(c[0]), c[1])

    def metric_section(self, c):
        return Section("metric", _loc(c[0]), Metric(str(c[1]), c[2], _loc(c[0])))

    def problem(self, c):
        name, name_loc = c[1]
        p = ProblemDraft(name, name_loc, _loc(c[0]))
        for it in c[2:]:
            p.sections.append(it)
            k = it.kind
            if k == "domain":
                if p.domain_name is None:
                    p.domain_name, p.domain_name_loc = it.content
            elif k == "requirements":
                p.requirements.extend(it.content)
            elif k == "objects":
                p.objects.extend(it.content)
            elif k == "init":
                p.init.extend(it.content)
            elif k == "goal" and p.goal is None:
                p.goal = it.content
            elif k == "constraints" and p.constraints is None:
                p.constraints = it.content
            elif k == "metric" and p.metric is None:
                p.metric = it.content
        return p

    # -- initial state --------------------------------------------------------

    def init_atom(self, c):
        return InitFact(tuple(str(t) for t in c[1:]), c[0].line, c[0].column)

    def ground_head(self, c):
        return tuple(str(t) for t in c[1:]), c[0].line, c[0].column

    def init_fluent(self, c):
        key, hl, hc = c[1]
        return InitValue(key, _number(c[2]), c[0].line, c[0].column, hl, hc)

    def init_not(self, c):
        fact = c[1]
        return InitNot(_ground(fact) if type(fact) is Token else fact, c[0].line, c[0].column)

    def timed_literal(self, c):
        loc = _loc(c[0])
        body = c[3]
        if type(body) is Token:
            body = _ground(body)
        if isinstance(body, InitFact):
            effect = Add(Atom(body.key[0], body.key[1:], body.loc), body.loc)
        elif isinstance(body, InitNot):
            f = body.fact
            effect = Delete(Atom(f.key[0], f.key[1:], f.loc), Loc(body.line, body.column))
        else:
            ref = FluentRef(body.key[0], body.key[1:], body.head_loc)
            effect = Assign("assign", ref, Number(body.value, body.loc), body.loc)
        return TimedLiteral(_number(c[2]), effect, loc)

    # -- PDDL3 constraints ----------------------------------------------------

    def con_and(self, c):
        return And(tuple(c[1:]), _loc(c[0]))

    def con_forall(self, c):
        return Forall(tuple(c[2]), c[3], _loc(c[0]))

    def con_preference(self, c):
        name = str(c[1]) if len(c) == 3 else None
        return Preference(name, c[-1], _loc(c[0]))

    def con_at_end(self, c):
        return Trajectory("at-end", (c[2],), (), _loc(c[0]))

    # -- entry points for problems built from Python --------------------------

    def init_element(self, c):
        return _ground(c[0]) if type(c[0]) is Token else c[0]

    def goal_spec(self, c):
        return c[0]

    constraint_spec = goal_spec

    def fluent_spec(self, c):
        return c[0]

    def metric_spec(self, c):
        return Metric(str(c[0]), c[1], _loc(c[0]))


def _trajectory_callback(op: str, n_times: int):
    def callback(self, c):
        times = tuple(_number(t) for t in c[1:1 + n_times])
        return Trajectory(op, tuple(c[1 + n_times:]), times, _loc(c[0]))
    return callback


for _rule, (_op, _n) in _TRAJECTORY.items():
    setattr(PddlTransformer, _rule, _trajectory_callback(_op, _n))
