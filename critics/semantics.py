"""Meaning checks on a domain or problem that has already been read.

The grammar only knows shapes; this module knows what the names mean:
every predicate, function, type, object, constant and variable must be declared
before it is used, with the right number of arguments, and a constant or object
must fit the type its position asks for. Each problem found becomes an
``Issue`` and all of them are returned together, so one run shows every
mistake in a file. Turning issues into located messages is the caller's job.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

from plansieve.critics.model import (
    Add, And, Arith, Assign, Atom, Compare, Delete, Domain, DurationRef, DurativeAction,
    Equal, Exists, FluentRef, Forall, ForallEffect, Imply, Loc, Metric, Not, Number, Or, Param,
    Preference, Signature, Timed, TimedEffect, TimedLiteral, Trajectory, Truth, ViolatedRef, When,
    is_subtype,
)
from plansieve.critics.transform import DomainDraft, InitFact, InitValue, ProblemDraft


@dataclass(frozen=True)
class Issue:
    """One thing wrong, and where.

    ``loc`` is the position of the node concerned; ``word`` picks a word inside it
    (0 is the first word after the node's ``(``), so a message can point at the
    exact argument without the model storing a position for every word.
    ``requirement`` is set when the issue is an unsupported PDDL requirement.
    """

    message: str
    loc: Loc | None = None
    word: int | None = None
    requirement: str | None = None


# Requirements plansieve reads and keeps. Source: PDDL 1.2 manual (McDermott et al. 1998)
# sec. 15; PDDL2.1 (Fox & Long 2003); PDDL2.2 (Edelkamp & Hoffmann 2004); PDDL3
# (Gerevini & Long 2005); action costs as in the IPC-2008 rules.
SUPPORTED_REQUIREMENTS = frozenset({
    ":strips", ":typing", ":negative-preconditions", ":equality",
    ":disjunctive-preconditions", ":existential-preconditions", ":universal-preconditions",
    ":quantified-preconditions", ":conditional-effects", ":adl",
    ":numeric-fluents", ":fluents", ":action-costs",
    ":durative-actions", ":duration-inequalities", ":timed-initial-literals",
    ":timed-initial-fluents", ":constraints", ":preferences",
})

# Requirements we know but do not implement, with what they are about.
KNOWN_UNSUPPORTED = {
    ":derived-predicates": "derived predicates",
    ":object-fluents": "functions whose value is an object",
    ":continuous-effects": "continuous effects (#t)",
    ":time": "processes and events (PDDL+)",
    ":domain-axioms": "domain axioms",
    ":safety-constraints": "safety constraints",
    ":expression-evaluation": "expression evaluation",
    ":open-world": "open-world semantics",
    ":true-negation": "true negation",
    ":ucpop": "domain axioms and safety constraints (:ucpop)",
    ":hierarchy": "hierarchical task networks",
    ":method-preconditions": "hierarchical task networks",
}


def requirement_issues(requirements: Iterable[tuple[str, Loc]]) -> list[Issue]:
    """One issue per requirement we cannot honour."""
    out = []
    for req, loc in requirements:
        if req in SUPPORTED_REQUIREMENTS:
            continue
        if req in KNOWN_UNSUPPORTED:
            msg = (f"requirement {req} ({KNOWN_UNSUPPORTED[req]}) is not supported; "
                   f"expected only requirements plansieve implements")
        else:
            msg = (f"unknown requirement {req}; expected a PDDL requirement such as "
                   f":strips, :typing or :durative-actions")
        out.append(Issue(msg, loc, requirement=req))
    return out


# ---------------------------------------------------------------------------
# Small helpers


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _types_text(types: tuple[str, ...]) -> str:
    return types[0] if len(types) == 1 else "either " + " or ".join(types)


def _suggest(name: str, known: Iterable[str]) -> str:
    close = difflib.get_close_matches(name, list(known), n=1)
    return f"; did you mean '{close[0]}'?" if close else ""


def _again(seen: dict[str, Loc | None], name: str, loc: Loc | None) -> str | None:
    """Remember where ``name`` first appeared; on a repeat, words saying where that was.

    None the first time; afterwards " (first at line N)", or "" when there is no place.
    """
    if name in seen:
        first = seen[name]
        return f" (first at line {first.line})" if first is not None else ""
    seen[name] = loc
    return None


def _duplicate_sections(sections, kinds: Iterable[str]) -> list[Issue]:
    out, seen = [], {}
    wanted = set(kinds)
    for s in sections:
        if s.kind not in wanted:
            continue
        if (first := _again(seen, s.kind, s.loc)) is not None:
            out.append(Issue(f"a second (:{s.kind} ...) section{first}; "
                             f"expected each section once", s.loc, 0))
    return out


class TypeTable:
    """Type declarations with a memoised "does this fit" test."""

    def __init__(self, parents: Mapping[str, tuple[str, ...]]) -> None:
        self.parents = parents
        self._fits: dict[tuple[tuple[str, ...], tuple[str, ...]], bool] = {}

    def declared(self, t: str) -> bool:
        return t in self.parents

    def is_subtype(self, child: str, parent: str) -> bool:
        return is_subtype(self.parents, child, parent)

    def fits(self, have: tuple[str, ...], want: tuple[str, ...]) -> bool:
        """True when every type in ``have`` is a subtype of some type in ``want``."""
        key = (have, want)
        r = self._fits.get(key)
        if r is None:
            r = all(any(self.is_subtype(h, w) for w in want) for h in have)
            self._fits[key] = r
        return r


# ---------------------------------------------------------------------------
# Formulas, effects and expressions


class BodyChecker:
    """Checks formulas, effects and expressions against one set of declarations.

    ``names`` maps every usable object or constant to its types; ``what_names``
    says what they are called in messages ("constant" in a domain, "object or
    constant" in a problem).
    """

    def __init__(self, domain: Domain, types: TypeTable, names: Mapping[str, tuple[str, ...]],
                 what_names: str) -> None:
        self.domain = domain
        self.types = types
        self.names = names
        self.what_names = what_names
        self.issues: list[Issue] = []
        self.where = ""  # "in action 'move'" etc.
        self.binders = "a parameter or a variable bound by forall or exists"
        self.durative = False
        self.metric = False

    def add(self, message: str, loc: Loc | None, word: int | None = None) -> None:
        self.issues.append(Issue(message, loc, word))

    # -- declarations inside bodies ---------------------------------------

    def params(self, params: Iterable[Param], scope: dict[str, tuple[str, ...]],
               kind: str) -> dict[str, tuple[str, ...]]:
        """Add ``params`` to a copy of ``scope``, reporting repeats and unknown types."""
        inner = dict(scope)
        seen: dict[str, Loc | None] = {}
        for p in params:
            if (first := _again(seen, p.name, p.loc)) is not None:
                self.add(f"{kind} '{p.name}' is declared twice{first}; "
                         f"expected distinct names", p.loc)
            self.check_types(p.types, p.loc, f"{kind} '{p.name}'")
            inner[p.name] = p.types
        return inner

    def check_types(self, types: tuple[str, ...], loc: Loc | None, owner: str) -> None:
        for t in types:
            if not self.types.declared(t):
                hint = (" (the domain has no (:types ...) section)"
                        if len(self.types.parents) == 1 else
                        _suggest(t, self.types.parents))
                self.add(f"type '{t}' of {owner} is not declared{hint}; expected a type from "
                         f"(:types ...) or 'object'", loc)

    # -- terms ---------------------------------------------------------------

    def term(self, t: str, scope: Mapping[str, tuple[str, ...]], want: tuple[str, ...] | None,
             loc: Loc | None, word: int | None, position: str) -> None:
        if t.startswith("?"):
            if t not in scope:
                self.add(f"variable '{t}' is not declared{self.where}; expected "
                         f"{self.binders}", loc, word)
            return
        have = self.names.get(t)
        if have is None:
            self.add(f"'{t}' is not a declared {self.what_names}"
                     f"{_suggest(t, self.names)}", loc, word)
        elif want is not None and not self.types.fits(have, want):
            self.add(f"'{t}' is of type {_types_text(have)}, but {position} must be of type "
                     f"{_types_text(want)}", loc, word)

    def arguments(self, sig: Signature, kind: str, args: tuple[str, ...],
                  scope: Mapping[str, tuple[str, ...]], loc: Loc | None) -> None:
        if len(args) != len(sig.params):
            shown = " ".join(p.name for p in sig.params)
            self.add(f"{kind} '{sig.name}' takes {_plural(len(sig.params), 'argument')}"
                     f"{f' ({shown})' if shown else ''}, but {len(args)} "
                     f"{'is' if len(args) == 1 else 'are'} given", loc, 0)
            return
        names, fits = self.names, self.types.fits
        for i, (a, p) in enumerate(zip(args, sig.params)):
            # The common case, a bound variable or a declared name that fits, needs
            # no message; anything else goes through term() to be reported.
            if a.startswith("?"):
                if a in scope:
                    continue
            elif (have := names.get(a)) is not None and fits(have, p.types):
                continue
            self.term(a, scope, p.types, loc, i + 1,
                      f"argument {i + 1} of '{sig.name}' ({p.name})")

    def atom(self, a: Atom, scope: Mapping[str, tuple[str, ...]]) -> None:
        sig = self.domain.predicates.get(a.predicate)
        if sig is None:
            if a.predicate in self.domain.functions:
                msg = (f"'{a.predicate}' is a function, not a predicate; expected a predicate "
                       f"(compare a function with =, <, <=, >= or >)")
            else:
                msg = (f"'{a.predicate}' is not a declared predicate"
                       f"{_suggest(a.predicate, self.domain.predicates)}")
            self.add(msg, a.loc, 0)
            for i, t in enumerate(a.args):
                self.term(t, scope, None, a.loc, i + 1, "")
            return
        self.arguments(sig, "predicate", a.args, scope, a.loc)

    # -- formulas ---------------------------------------------------------------

    def formula(self, f, scope: Mapping[str, tuple[str, ...]]) -> None:
        t = type(f)
        if t is Atom:
            self.atom(f, scope)
        elif t is And or t is Or:
            for p in f.parts:
                self.formula(p, scope)
        elif t is Not:
            self.formula(f.body, scope)
        elif t is Imply:
            self.formula(f.condition, scope)
            self.formula(f.then, scope)
        elif t is Exists or t is Forall:
            self.formula(f.body, self.params(f.params, scope, "variable"))
        elif t is Equal:
            self.term(f.left, scope, None, f.loc, 1, "")
            self.term(f.right, scope, None, f.loc, 2, "")
        elif t is Compare:
            self.expr(f.left, scope)
            self.expr(f.right, scope)
        elif t is Timed:
            self.formula(f.body, scope)
        elif t is Preference:
            self.formula(f.body, scope)
        elif t is Trajectory:
            for p in f.formulas:
                self.formula(p, scope)
        elif t is Truth:
            pass
        else:  # pragma: no cover - a model node type this checker does not know
            raise TypeError(f"unexpected formula node {f!r}")

    # -- effects ------------------------------------------------------------------

    def effect(self, e, scope: Mapping[str, tuple[str, ...]]) -> None:
        t = type(e)
        if t is Add or t is Delete:
            self.atom(e.atom, scope)
        elif t is Assign:
            self.fluent(e.fluent, scope)
            self.expr(e.value, scope)
        elif t is When:
            self.formula(e.condition, scope)
            for x in e.effects:
                self.effect(x, scope)
        elif t is ForallEffect:
            inner = self.params(e.params, scope, "variable")
            for x in e.effects:
                self.effect(x, inner)
        elif t is TimedEffect:
            self.effect(e.effect, scope)
        else:  # pragma: no cover
            raise TypeError(f"unexpected effect node {e!r}")

    # -- numeric expressions ----------------------------------------------------

    def fluent(self, f: FluentRef, scope: Mapping[str, tuple[str, ...]]) -> None:
        sig = self.domain.functions.get(f.function)
        # A bare name (no parenthesis of its own) is located by its own position.
        word = 0 if f.loc is not None else None
        if sig is None:
            if self.metric and f.function == "total-time" and not f.args:
                return
            if f.function in self.domain.predicates:
                msg = (f"'{f.function}' is a predicate, not a function; expected a function "
                       f"from (:functions ...)")
            else:
                msg = (f"'{f.function}' is not a declared function"
                       f"{_suggest(f.function, self.domain.functions)}")
            self.add(msg, f.loc, word)
            return
        self.arguments(sig, "function", f.args, scope, f.loc)

    def expr(self, x, scope: Mapping[str, tuple[str, ...]]) -> None:
        t = type(x)
        if t is Number:
            return
        if t is FluentRef:
            self.fluent(x, scope)
        elif t is Arith:
            for a in x.args:
                self.expr(a, scope)
        elif t is DurationRef:
            if not self.durative:
                self.add("?duration can only be used inside a durative action", x.loc)
        elif t is ViolatedRef:
            pass  # checked against the preference names once all are known
        else:  # pragma: no cover
            raise TypeError(f"unexpected expression node {x!r}")


# ---------------------------------------------------------------------------
# Domain


def check_domain(draft: DomainDraft, domain: Domain) -> list[Issue]:
    """Every meaning problem in a domain; ``domain`` is ``draft`` assembled."""
    issues = _duplicate_sections(draft.sections, ("requirements", "types", "constants",
                                                   "predicates", "functions", "constraints"))
    types = TypeTable(domain.types)

    # Types: each declared once, no cycle. (A parent named only after '-' is declared
    # implicitly by DomainDraft.build, as mature readers do.)
    seen: dict[str, Loc | None] = {}
    for t in draft.types:
        if t.name == "object":
            if t.types != ("object",):
                issues.append(Issue("'object' is the root type and cannot have a parent; "
                                    "expected it alone or as a parent", t.loc))
            continue
        if (first := _again(seen, t.name, t.loc)) is not None:
            issues.append(Issue(f"type '{t.name}' is declared twice{first}; "
                                f"expected each type once", t.loc))
    for name, parents in domain.types.items():
        if name != "object" and any(types.is_subtype(p, name) for p in parents):
            issues.append(Issue(f"type '{name}' is its own ancestor; expected the type "
                                f"hierarchy to have no cycle", seen.get(name)))

    body = BodyChecker(domain, types, domain.constants, "constant")

    seen = {}
    for c in draft.constants:
        if (first := _again(seen, c.name, c.loc)) is not None:
            body.add(f"constant '{c.name}' is declared twice{first}; "
                     f"expected each constant once", c.loc)
        body.check_types(c.types, c.loc, f"constant '{c.name}'")

    # Predicates and functions share one namespace.
    seen = {}
    for sig, kind in [(p, "predicate") for p in draft.predicates] + \
                     [(f, "function") for f in draft.functions]:
        if (first := _again(seen, sig.name, sig.loc)) is not None:
            body.add(f"{kind} '{sig.name}' is declared twice{first}; "
                     f"expected each predicate and function name once", sig.loc, 0)
        body.params(sig.params, {}, "parameter")
        if kind == "function" and sig.result != "number":
            if sig.result == "object" or types.declared(sig.result or ""):
                issues.append(Issue(f"function '{sig.name}' returns an object ({sig.result}), "
                                    f"which needs :object-fluents, not supported; expected "
                                    f"'- number'", sig.loc, 0, requirement=":object-fluents"))
            else:
                body.add(f"function '{sig.name}' has result type '{sig.result}'; "
                         f"expected '- number'", sig.loc, 0)

    seen = {}
    for a in draft.actions:
        if (first := _again(seen, a.name, a.loc)) is not None:
            body.add(f"action '{a.name}' is declared twice{first}; "
                     f"expected each action name once", a.loc, 1)
        body.where = f" in action '{a.name}'"
        scope = body.params(a.params, {}, "parameter")
        if isinstance(a, DurativeAction):
            body.durative = True
            for d in a.duration:
                body.expr(d.value, scope)
            if a.condition is not None:
                body.formula(a.condition, scope)
        elif a.precondition is not None:
            body.formula(a.precondition, scope)
        for e in a.effects:
            body.effect(e, scope)
        body.durative = False
    body.where = " in the domain constraints"
    body.binders = "a variable bound by forall or exists"
    if draft.constraints is not None:
        body.formula(draft.constraints, {})
    return issues + body.issues


def unsupported_in_domain(draft: DomainDraft) -> list[Issue]:
    """Requirements and sections we cannot honour; they stop the read before other checks."""
    out = requirement_issues(draft.requirements)
    for u in draft.unsupported:
        out.append(Issue(f"{u.what} are not supported (they need {u.requirement}); expected "
                         f"actions and durative actions only", u.loc, requirement=u.requirement))
    return out


# ---------------------------------------------------------------------------
# Problem


def preference_names(formulas: Iterable) -> set[str]:
    """Names of the PDDL3 preferences inside ``formulas`` (any may be None)."""
    out: set[str] = set()
    todo = [f for f in formulas if f is not None]
    while todo:
        f = todo.pop()
        t = type(f)
        if t is Preference:
            if f.name is not None:
                out.add(f.name)
            todo.append(f.body)
        elif t is And or t is Or:
            todo.extend(f.parts)
        elif t is Not or t is Timed or t is Exists or t is Forall:
            todo.append(f.body)
        elif t is Imply:
            todo.extend((f.condition, f.then))
        elif t is Trajectory:
            todo.extend(f.formulas)
    return out


def domain_preferences(domain: Domain) -> set[str]:
    """Preference names the domain defines (preconditions, conditions, constraints)."""
    return preference_names([a.precondition for a in domain.actions.values()]
                            + [a.condition for a in domain.durative_actions.values()]
                            + [domain.constraints])


class ProblemChecker:
    """Checks the parts of a problem against a domain, one part at a time.

    Files and problems built from Python both go through here, so they get the
    same checks; the caller says which part an issue belongs to.
    """

    def __init__(self, domain: Domain, objects: Iterable[Param]) -> None:
        self.domain = domain
        self.types = TypeTable(domain.types)
        self.object_list = list(objects)
        names: dict[str, tuple[str, ...]] = dict(domain.constants)
        for o in self.object_list:
            names.setdefault(o.name, o.types)
        self.names = names
        self.body = BodyChecker(domain, self.types, names, "object or constant")
        self.body.where = " in the problem"
        self.body.binders = "a variable bound by forall or exists"
        self._values: dict[tuple, InitValue] = {}
        # Fast path for initial facts: per predicate (function), per argument, the set
        # of names that fit there; computed on first use.
        self._fit_sets: dict[tuple[str, ...], frozenset[str]] = {}
        self._by_types: dict[tuple[str, ...], list[str]] | None = None
        self._slots: dict[tuple[str, bool], tuple[frozenset[str], ...] | None] = {}

    def _fitting(self, want: tuple[str, ...]) -> frozenset[str]:
        s = self._fit_sets.get(want)
        if s is None:
            if self._by_types is None:  # names grouped by their types: few groups
                self._by_types = {}
                for n, t in self.names.items():
                    self._by_types.setdefault(t, []).append(n)
            fits = self.types.fits
            s = frozenset(n for t, group in self._by_types.items() if fits(t, want)
                          for n in group)
            self._fit_sets[want] = s
        return s

    def _arguments_fit(self, key: tuple, function: bool) -> bool:
        """True when ``key`` names a declared predicate/function with fitting arguments."""
        try:
            slots = self._slots[key[0], function]
        except KeyError:
            sig = (self.domain.functions if function else self.domain.predicates).get(key[0])
            slots = tuple(self._fitting(p.types) for p in sig.params) if sig else None
            self._slots[key[0], function] = slots
        if slots is None or len(slots) != len(key) - 1:
            return False
        for a, fitting in zip(key[1:], slots):
            if a not in fitting:
                return False
        return True

    def _take(self) -> list[Issue]:
        out, self.body.issues = self.body.issues, []
        return out

    def object_issues(self) -> list[tuple[int, Issue]]:
        """Repeated objects, unknown types, clashes with domain constants (with index)."""
        out: list[tuple[int, Issue]] = []
        seen: dict[str, Loc | None] = {}
        constants = self.domain.constants
        known: set[tuple[str, ...]] = set()  # type lists already found declared
        for i, o in enumerate(self.object_list):
            if (first := _again(seen, o.name, o.loc)) is not None:
                out.append((i, Issue(f"object '{o.name}' is declared twice{first}; "
                                     f"expected each object once", o.loc)))
            const = constants.get(o.name)
            if const is not None and const != o.types:
                out.append((i, Issue(f"object '{o.name}' repeats a domain constant with "
                                     f"another type ({_types_text(const)}); expected a new name",
                                     o.loc)))
            if o.types in known:
                continue
            self.body.check_types(o.types, o.loc, f"object '{o.name}'")
            if self.body.issues:
                out.extend((i, x) for x in self._take())
            else:
                known.add(o.types)
        return out

    def fact_issues(self, key: tuple, loc: Loc | None) -> list[Issue]:
        """An initial fact ``("pred", "arg", ...)`` written at ``loc``."""
        if self._arguments_fit(key, False):
            return []
        self.body.atom(Atom(key[0], key[1:], loc), {})
        return self._take()

    def value_issues(self, el: InitValue) -> list[Issue]:
        """An initial value ``(= (f args) value)``; a second, different value is an issue."""
        key = el.key
        out: list[Issue] = []
        if not self._arguments_fit(key, True):
            self.body.fluent(FluentRef(key[0], key[1:], el.head_loc), {})
            out = self._take()
        before = self._values.get(key)
        if before is None:
            self._values[key] = el
        elif before.value != el.value:
            shown = "(" + " ".join(key) + ")"
            first = f" (line {before.line})" if before.line is not None else ""
            out.append(Issue(f"{shown} is given two initial values, {before.value:g}{first} "
                             f"and {el.value:g}; expected one value", el.loc))
        return out

    def timed_issues(self, til: TimedLiteral) -> list[Issue]:
        out: list[Issue] = []
        if til.time < 0:
            out.append(Issue(f"a timed initial literal at time {til.time:g}; expected a time "
                             f"of 0 or more", til.loc, 0))
        e = til.effect
        if isinstance(e, (Add, Delete)):
            out.extend(self.fact_issues(e.atom.key, e.atom.loc))
        else:  # a value set later: check the term, but it is no second initial value
            fl = e.fluent
            key = (fl.function, *fl.args)
            if not self._arguments_fit(key, True):
                self.body.fluent(FluentRef(fl.function, fl.args, fl.loc), {})
                out.extend(self._take())
        return out

    def init_issues(self, el) -> list[Issue]:
        t = type(el)
        if t is InitFact:
            if self._arguments_fit(el.key, False):
                return []
            return self.fact_issues(el.key, el.loc)
        if t is InitValue:
            return self.value_issues(el)
        return self.timed_issues(el)

    def formula_issues(self, f) -> list[Issue]:
        self.body.formula(f, {})
        return self._take()

    def metric_issues(self, m: Metric, preferences: set[str]) -> list[Issue]:
        self.body.metric = True
        self._metric_expr(m.expr, preferences)
        self.body.metric = False
        return self._take()

    def _metric_expr(self, x, preferences: set[str]) -> None:
        if isinstance(x, ViolatedRef):
            if x.preference not in preferences:
                self.body.add(f"no preference is named '{x.preference}'"
                              f"{_suggest(x.preference, preferences)}; expected the name of a "
                              f"preference in the goal or constraints", x.loc, 1)
        elif isinstance(x, Arith):
            for a in x.args:
                self._metric_expr(a, preferences)
        else:
            self.body.expr(x, {})


def check_problem(draft: ProblemDraft, domain: Domain) -> list[Issue]:
    """Every meaning problem in a problem file read against ``domain``."""
    issues = _duplicate_sections(draft.sections, ("domain", "requirements", "objects", "init",
                                                  "goal", "constraints", "metric"))
    if draft.domain_name is None:
        issues.append(Issue("the problem does not say its domain; expected (:domain name) "
                            "after (problem ...)", draft.name_loc))
    elif draft.domain_name != domain.name:
        issues.append(Issue(f"this problem is for domain '{draft.domain_name}', but the domain "
                            f"given is '{domain.name}'; expected (:domain {domain.name})",
                            draft.domain_name_loc))
    checker = ProblemChecker(domain, draft.objects)
    issues.extend(i for _, i in checker.object_issues())
    for el in draft.init:
        issues.extend(checker.init_issues(el))
    if draft.goal is not None:
        issues.extend(checker.formula_issues(draft.goal))
    if draft.constraints is not None:
        issues.extend(checker.formula_issues(draft.constraints))
    if draft.metric is not None:
        prefs = preference_names([draft.goal, draft.constraints]) | domain_preferences(domain)
        issues.extend(checker.metric_issues(draft.metric, prefs))
    return issues
