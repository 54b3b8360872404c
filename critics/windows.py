"""Time windows set by timed initial literals (PDDL 2.2, Edelkamp & Hoffmann 2004).

A timed initial literal makes a fact true or false at a fixed time whatever the
plan does: "the depot opens at 6 and closes at 20" is ``(at 6 (open depot))``
and ``(at 20 (not (open depot)))``. Read from the initial state and the literals
alone, each such fact is true in a list of half-open windows ``[opens, closes)``.
When a plan needs the fact outside them, the useful feedback is the windows
themselves, not only "the condition is false".
"""

from __future__ import annotations

from bisect import bisect_left, bisect_right

from plansieve.critics.grounding import GroundAction
from plansieve.critics.verdict import Window


class Windows:
    """Per fact set by timed initial literals: when it changes, and so when it holds."""

    def __init__(self, initial: set | frozenset, literals: list[tuple[object, GroundAction]]) -> None:
        # key -> [(time, value)] in time order (stable: written order at equal times)
        changes: dict[tuple, list] = {}
        for t, ga in sorted(literals, key=lambda p: p[0]):
            for key in ga.dels:
                changes.setdefault(key, []).append((t, False))
            for key in ga.adds:
                changes.setdefault(key, []).append((t, True))
        self._initial = initial
        self._changes = changes
        self._times = {k: [t for t, _ in v] for k, v in changes.items()}

    def controls(self, key: tuple) -> bool:
        return key in self._changes

    def value_at(self, key: tuple, t, *, literals_at_t: bool) -> bool:
        """The fact's value at ``t`` by the literals alone; ``literals_at_t`` says whether
        those stamped exactly ``t`` have happened yet (they have, except for an end
        happening, which comes first at equal times)."""
        times = self._times[key]
        i = (bisect_right if literals_at_t else bisect_left)(times, t)
        if i == 0:
            return key in self._initial
        return self._changes[key][i - 1][1]

    def windows(self, key: tuple, value: bool = True) -> list[Window]:
        """The windows in which the fact has ``value`` (True: holds; False: does not)."""
        out: list[Window] = []
        on = (key in self._initial) == value
        opened = None
        for t, v in self._changes[key]:
            now = v == value
            if now and not on:
                opened = float(t)
            elif on and not now:
                if opened is None or float(t) > opened:
                    out.append(Window(opens=opened, closes=float(t)))
                # an instant window [t, t) is empty: a fact set and unset at one time never holds
            on = now
        if on:
            out.append(Window(opens=opened, closes=None))
        return out


def describe(windows: list[Window]) -> str:
    """``from 6 to 20 and from 30 on`` for messages."""
    from plansieve.critics.render import number

    if not windows:
        return "never"
    bits = []
    for w in windows:
        if w.opens is None and w.closes is None:
            bits.append("always")
        elif w.opens is None:
            bits.append(f"until {number(w.closes)}")
        elif w.closes is None:
            bits.append(f"from {number(w.opens)} on")
        else:
            bits.append(f"from {number(w.opens)} to {number(w.closes)}")
    return " and ".join(bits)
