"""What a happening reads and writes, and which close happenings interfere.

PDDL 2.1 (Fox & Long 2003, sec. 8, the "no moving targets" rule) lets two
events share a time only if neither changes what the other reads or changes:
the order in which they would be applied must not matter. Planners keep such
events apart by a small separation, and a plan whose interfering happenings are
closer than that cannot be trusted to run as written. We apply the rule to every
pair of happenings of different steps closer than the tolerance (equal times
included), and call two happenings interfering when

* one adds an atom the other deletes,
* one changes an atom or fluent the other reads (in a condition, in the
  condition of a ``when`` effect, or on the right-hand side of a numeric effect),
* both change one fluent, unless both only increase or decrease it: additive
  changes commute (Fox & Long 2003 treat them as combinable).

The start and end of one step are ordered by definition and are not compared.
``over all`` conditions are not part of either end: they are checked as
invariants in every state inside the interval instead.
"""

from __future__ import annotations

from collections import defaultdict, deque
from dataclasses import dataclass

from plansieve.critics.grounding import Calc, GroundAction
from plansieve.critics.model import And, Atom, Compare, Not, Or, Timed

_ADDITIVE = frozenset({"increase", "decrease"})
_EMPTY: frozenset = frozenset()


@dataclass(frozen=True, slots=True)
class Touch:
    """The facts and fluents one ground action reads and writes."""

    reads: frozenset  # atoms and fluent keys read
    adds: frozenset
    dels: frozenset
    sets: frozenset  # fluents assigned or scaled
    bumps: frozenset  # fluents only increased or decreased
    writes: frozenset  # all four above
    keys: frozenset  # everything read or written


def formula_reads(f, out: set) -> set:
    """Every atom key and fluent key a ground formula or expression reads."""
    t = type(f)
    if t is Atom:
        out.add((f.predicate, *f.args))
    elif t is tuple:
        out.add(f)
    elif t is Not or t is Timed:
        formula_reads(f.body, out)
    elif t is And or t is Or:
        for p in f.parts:
            formula_reads(p, out)
    elif t is Compare:
        formula_reads(f.left, out)
        formula_reads(f.right, out)
    elif t is Calc:
        for a in f.args:
            formula_reads(a, out)
    return out


def touch_of(ga: GroundAction) -> Touch:
    if ga.plain and not ga.pre_other:  # the STRIPS case: set algebra only
        reads = ga.pre_pos | ga.pre_neg
        writes = ga.adds | ga.dels
        return Touch(reads, ga.adds, ga.dels, _EMPTY, _EMPTY, writes, writes | reads)
    reads: set = set(ga.pre_pos) | ga.pre_neg
    for f in ga.pre_other:
        formula_reads(f, reads)
    adds, dels = set(ga.adds), set(ga.dels)
    sets: set = set()
    bumps: set = set()
    numeric = list(ga.numeric)
    for c in ga.conditional:
        formula_reads(c.condition, reads)
        adds |= c.adds
        dels |= c.dels
        numeric.extend(c.numeric)
    for op, key, rhs in numeric:
        formula_reads(rhs, reads)
        (bumps if op in _ADDITIVE else sets).add(key)
    bumps -= sets
    writes = frozenset(adds | dels | sets | bumps)
    return Touch(frozenset(reads), frozenset(adds), frozenset(dels), frozenset(sets),
                 frozenset(bumps), writes, writes | reads)


def clash(a: Touch, b: Touch):
    """A fact or fluent through which ``a`` and ``b`` interfere, or None."""
    for key in a.adds & b.dels:
        return key
    for key in a.dels & b.adds:
        return key
    aw, bw = a.writes, b.writes
    for key in aw & b.reads:
        return key
    for key in bw & a.reads:
        return key
    for key in (a.sets & bw) | (b.sets & aw):
        return key
    return None


@dataclass(frozen=True, slots=True)
class Close:
    """Two interfering happenings ``gap`` apart; ``first`` comes before ``second``."""

    first: int  # index into the happening list
    second: int
    gap: object
    shared: tuple


def close_pairs(times: list, owners: list, touches: list[Touch], tolerance) -> list[Close]:
    """Interfering pairs of happenings of different owners closer than ``tolerance``.

    ``times`` is sorted (exact numbers); ``owners`` names the step (or timed
    literal) of each happening. A sliding window holds the happenings still within
    ``tolerance`` of the newest, indexed by the keys they read and write, so each
    newcomer is compared only with window members that touch one of its keys.
    """
    out: list[Close] = []
    floats = [float(t) for t in times]
    tol = float(tolerance)
    window: deque[int] = deque()
    by_key: dict = defaultdict(deque)  # key -> window members touching it, oldest first
    for k, t in enumerate(times):
        while window and not _within(times, floats, window[0], k, tolerance, tol):
            j = window.popleft()
            for key in touches[j].keys:
                members = by_key[key]
                members.popleft()  # j is the oldest member of every list it is in
                if not members:
                    del by_key[key]
        tk = touches[k]
        seen: set[int] = set()
        for key in tk.keys:
            members = by_key.get(key)
            if not members:
                continue
            for j in members:
                if j in seen or owners[j] == owners[k]:
                    continue
                seen.add(j)
                shared = clash(touches[j], tk)
                if shared is not None:
                    out.append(Close(j, k, t - times[j], shared))
        window.append(k)
        for key in tk.keys:
            by_key[key].append(k)
    out.sort(key=lambda c: (c.second, c.first))
    return out


def _within(times: list, floats: list, j: int, k: int, tolerance, tol: float) -> bool:
    """``times[k] - times[j] < tolerance``, decided on floats unless too near to call."""
    gap = floats[k] - floats[j]
    slack = 1e-9 * (1.0 + abs(floats[k]))
    if gap < tol - slack:
        return True
    if gap > tol + slack:
        return False
    return times[k] - times[j] < tolerance
