"""Write model nodes back as PDDL text, for findings, feedback and round-trip tests."""

from __future__ import annotations

from fractions import Fraction

from plansieve.critics.grounding import Calc
from plansieve.critics.model import (
    Add, And, Arith, Assign, Atom, Compare, Delete, DurationRef, Equal, Exists, Forall,
    ForallEffect, FluentRef, Imply, Not, Number, Or, Param, Preference, Timed, TimedEffect,
    Trajectory, Truth, ViolatedRef, When,
)


def number(x: float | int | Fraction) -> str:
    """A number as PDDL writes it: ``3`` rather than ``3.0``, ``0.25`` rather than ``1/4``."""
    if isinstance(x, Fraction):
        if x.denominator == 1:
            return str(x.numerator)
        x = float(x)
    if float(x).is_integer():
        return str(int(x))
    return repr(float(x))


def ground_atom(key: tuple) -> str:
    """``("on", "a", "b")`` -> ``(on a b)``."""
    return "(" + " ".join(key) + ")"


def params(ps: tuple[Param, ...]) -> str:
    out = []
    for p in ps:
        if p.types == ("object",):
            out.append(p.name)
        elif len(p.types) == 1:
            out.append(f"{p.name} - {p.types[0]}")
        else:
            out.append(f"{p.name} - (either {' '.join(p.types)})")
    return "(" + " ".join(out) + ")"


_TIMED = {"start": "at start", "end": "at end", "all": "over all"}


def expr(e) -> str:
    """Lifted (model) or ground (from grounding) expressions alike."""
    if isinstance(e, tuple):  # a ground fluent key
        return ground_atom(e)
    if isinstance(e, Calc):
        return "(" + " ".join((e.op, *(expr(a) for a in e.args))) + ")"
    if isinstance(e, Number):
        return number(e.value)
    if isinstance(e, (int, float, Fraction)):
        return number(e)
    if isinstance(e, FluentRef):
        return "(" + " ".join((e.function, *e.args)) + ")"
    if isinstance(e, Arith):
        return "(" + " ".join((e.op, *(expr(a) for a in e.args))) + ")"
    if isinstance(e, DurationRef):
        return "?duration"
    if isinstance(e, ViolatedRef):
        return f"(is-violated {e.preference})"
    raise TypeError(f"not an expression: {e!r}")


def formula(f) -> str:
    if isinstance(f, Atom):
        return "(" + " ".join((f.predicate, *f.args)) + ")"
    if isinstance(f, Truth):
        return "(and)" if f.value else "(or)"
    if isinstance(f, Equal):
        return f"(= {f.left} {f.right})"
    if isinstance(f, Not):
        return f"(not {formula(f.body)})"
    if isinstance(f, And):
        return "(and " + " ".join(formula(p) for p in f.parts) + ")" if f.parts else "(and)"
    if isinstance(f, Or):
        return "(or " + " ".join(formula(p) for p in f.parts) + ")" if f.parts else "(or)"
    if isinstance(f, Imply):
        return f"(imply {formula(f.condition)} {formula(f.then)})"
    if isinstance(f, Exists):
        return f"(exists {params(f.params)} {formula(f.body)})"
    if isinstance(f, Forall):
        return f"(forall {params(f.params)} {formula(f.body)})"
    if isinstance(f, Compare):
        return f"({f.op} {expr(f.left)} {expr(f.right)})"
    if isinstance(f, Timed):
        return f"({_TIMED[f.when]} {formula(f.body)})"
    if isinstance(f, Preference):
        name = f" {f.name}" if f.name else ""
        return f"(preference{name} {formula(f.body)})"
    if isinstance(f, Trajectory):
        op = "at end" if f.op == "at-end" else f.op
        bits = [number(t) for t in f.times] + [formula(x) for x in f.formulas]
        return f"({op} {' '.join(bits)})"
    raise TypeError(f"not a formula: {f!r}")


def effect(e) -> str:
    if isinstance(e, Add):
        return formula(e.atom)
    if isinstance(e, Delete):
        return f"(not {formula(e.atom)})"
    if isinstance(e, Assign):
        return f"({e.op} {expr(e.fluent)} {expr(e.value)})"
    if isinstance(e, When):
        return f"(when {formula(e.condition)} {effects(e.effects)})"
    if isinstance(e, ForallEffect):
        return f"(forall {params(e.params)} {effects(e.effects)})"
    if isinstance(e, TimedEffect):
        return f"({_TIMED[e.when]} {effect(e.effect)})"
    raise TypeError(f"not an effect: {e!r}")


def effects(es: tuple) -> str:
    if len(es) == 1:
        return effect(es[0])
    return "(and " + " ".join(effect(e) for e in es) + ")"
