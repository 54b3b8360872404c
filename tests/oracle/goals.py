"""Problem variants whose goal is a state the oracle reached by a random walk.

A benchmark goal is far beyond a random walk, so almost every walk would be
invalid for the same dull reason. Rewriting the goal to a few facts of a reached
state gives a real mix: the walk that reached it is valid, its prefixes,
reorderings and mutants may or may not be.

One goal description feeds both sides: it is written as PDDL into the variant's
problem file, which our reader parses, and built directly as the oracle's own
expressions on a clone of its parsed problem (its reader is too slow to re-read
a domain for every variant).
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

from .reference import ReferenceProblem, register_variant

Key = tuple[str, ...]  # ("on", "a", "b") or ("value", "c0")


@dataclass(frozen=True)
class Goal:
    """A conjunction of atoms, negated atoms and numeric comparisons."""

    atoms: tuple[Key, ...] = ()
    negated: tuple[Key, ...] = ()
    # (op, fluent, bound, shifted): shifted means "(op (+ fluent 1) bound+1)".
    comparisons: tuple[tuple[str, Key, Fraction, bool], ...] = ()

    def pddl(self) -> str:
        parts = [_atom(a) for a in self.atoms]
        parts += [f"(not {_atom(a)})" for a in self.negated]
        for op, key, bound, shifted in self.comparisons:
            if shifted:
                parts.append(f"({op} (+ {_atom(key)} 1) {_num(bound + 1)})")
            else:
                parts.append(f"({op} {_atom(key)} {_num(bound)})")
        return "(and " + " ".join(parts) + ")"

    def oracle_goals(self, ref: ReferenceProblem) -> list:
        """The same goal as the oracle's expressions."""
        em = ref.problem.environment.expression_manager

        def fluent(key: Key):
            return em.FluentExp(ref.fluents[key[0]], [em.ObjectExp(ref.objects[o]) for o in key[1:]])

        out = [fluent(a) for a in self.atoms]
        out += [em.Not(fluent(a)) for a in self.negated]
        ops = {">=": em.GE, "<=": em.LE, ">": em.GT, "<": em.LT, "=": em.Equals}
        for op, key, bound, shifted in self.comparisons:
            left, right = fluent(key), bound
            if shifted:
                left, right = em.Plus(left, 1), bound + 1
            out.append(ops[op](left, em.Real(Fraction(right))))
        return out


def goal_from_state(ref: ReferenceProblem, state, rng: random.Random, *,
                    negative: bool, numeric: bool) -> Goal:
    """A goal that holds in ``state`` (as the oracle sees it).

    Prefers facts that changed since the initial state, so the goal is not
    already true at the start; never picks facts no action can change. Negated
    atoms only where the domain declares negative preconditions (or ADL);
    numeric comparisons only for numeric domains, and only on values exact in
    binary floating point, so float and rational arithmetic cannot disagree at
    the boundary.
    """
    atoms0, nums0 = ref.facts(ref.initial_state())
    atoms, nums = ref.facts(state)
    static = {f.name.lower() for f in ref.problem.get_static_fluents()}
    gained = sorted(atoms - atoms0)
    kept = sorted(a for a in atoms & atoms0 if a[0] not in static)
    pool = gained if gained and rng.random() < 0.85 else gained + kept
    chosen = rng.sample(pool, min(len(pool), rng.randint(1, 3)))
    negated: list[Key] = []
    if negative:
        lost = sorted(atoms0 - atoms)
        negated = rng.sample(lost, min(len(lost), rng.randint(0, 1)))
    comparisons = []
    if numeric:
        changed = sorted(k for k, v in nums.items() if nums0.get(k) != v and _exact(v))
        same = sorted(k for k, v in nums.items() if nums0.get(k) == v and _exact(v)
                      and k[0] not in static)
        pool = changed if changed else same
        for key in rng.sample(pool, min(len(pool), rng.randint(1, 2))):
            v = nums[key]
            op = rng.choice([">=", "<=", "=", ">", "<"])
            # Half the time right on the boundary, where off-by-one mistakes show.
            slack = Fraction(0) if op in (">=", "<=", "=") and rng.random() < 0.6 else Fraction(1, 2)
            bound = v - slack if op in (">=", ">") else v + slack if op in ("<=", "<") else v
            # Now and then through a sum, so goal arithmetic is exercised too.
            comparisons.append((op, key, bound, rng.random() < 0.3))
    return Goal(tuple(chosen), tuple(negated), tuple(comparisons))


def make_variant(ref: ReferenceProblem, goal: Goal, out_dir: Path, tag: str) -> ReferenceProblem:
    """Write the variant's problem file (for our reader) and register it with the oracle."""
    base = ref.problem_path
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / f"{base.stem}-{tag}.pddl"
    path.write_text(with_goal(base.read_text(), goal.pddl(), f"-{tag}"))
    return register_variant(ref, goal.oracle_goals(ref), path)


def with_goal(problem_text: str, goal: str, name_suffix: str) -> str:
    """The problem text with its ``:goal`` section replaced and its name changed."""
    start = _find_section(problem_text, "(:goal")
    end = _matching_paren(problem_text, start)
    text = problem_text[:start] + f"(:goal {goal})" + problem_text[end + 1:]
    p = _find_section(text, "(problem") + len("(problem")
    while text[p].isspace():
        p += 1
    while not text[p].isspace() and text[p] != ")":
        p += 1
    return text[:p] + name_suffix + text[p:]


def _atom(key: Key) -> str:
    return "(" + " ".join(key) + ")"


def _exact(v: Fraction) -> bool:
    d = v.denominator
    return d & (d - 1) == 0 and d <= 1024 and abs(v) < 2 ** 40


def _num(v: Fraction) -> str:
    if v.denominator == 1:
        return str(v.numerator)
    return repr(float(v))  # exact: denominators are powers of two


def _strip_comments(text: str) -> str:
    """Comments blanked with spaces, so offsets stay the same."""
    out, in_comment = [], False
    for ch in text:
        if ch == ";":
            in_comment = True
        elif ch == "\n":
            in_comment = False
        out.append(" " if in_comment and ch != "\n" else ch)
    return "".join(out)


def _find_section(text: str, opener: str) -> int:
    i = _strip_comments(text).lower().find(opener)
    if i < 0:
        raise ValueError(f"no {opener} section")
    return i


def _matching_paren(text: str, start: int) -> int:
    plain = _strip_comments(text)
    depth = 0
    for i in range(start, len(plain)):
        if plain[i] == "(":
            depth += 1
        elif plain[i] == ")":
            depth -= 1
            if depth == 0:
                return i
    raise ValueError("unbalanced parentheses")
