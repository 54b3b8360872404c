"""Seeded random walks through the oracle's own simulator, and plan mutations.

The walks only ever take steps that ``unified_planning``'s simulator calls
applicable, so the plans they yield are made without any of our code. Mutations
then break them the way a guesser might: a step lost, two steps out of order, a
wrong argument, an action that does not exist, a call with the wrong number of
arguments. Whether a mutant is still valid is for the oracle to say — dropping
or swapping steps often leaves a plan valid.
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from typing import Sequence

from .reference import ReferenceProblem, Step, step_of

MUTATIONS = ("drop", "swap", "duplicate", "insert", "substitute", "unknown-object",
             "unknown-action", "extra-argument", "missing-argument")


@dataclass(frozen=True)
class Walk:
    steps: tuple[Step, ...]
    final_state: object  # the oracle's state after the last step


def random_walk(ref: ReferenceProblem, rng: random.Random, length: int,
                after: Walk | None = None) -> Walk:
    """Up to ``length`` more steps, each drawn uniformly from those the oracle finds applicable.

    With ``after``, the walk continues from where that one (on the same
    ``ref``) ended. Candidates are visited in a seeded random order and the
    first applicable one is taken: a uniform draw among the applicable ones,
    and much cheaper than testing every ground action at every step.
    """
    state = after.final_state if after else ref.initial_state()
    steps: list[Step] = list(after.steps) if after else []
    order = list(range(len(ref.candidates)))
    for _ in range(length):
        rng.shuffle(order)
        for i in order:
            action, params = ref.candidates[i]
            if ref.is_applicable(state, action, params):
                steps.append(step_of(action, params))
                state = ref.apply(state, action, params)
                break
        else:
            break  # nothing is applicable: the walk ends early
    return Walk(tuple(steps), state)


def mutate(ref: ReferenceProblem, steps: Sequence[Step], kind: str,
           rng: random.Random) -> tuple[Step, ...] | None:
    """``steps`` changed by one mutation of the given kind, or None if it cannot apply."""
    steps = list(steps)
    n = len(steps)
    objects = sorted(ref.objects)
    if kind == "insert":
        action, params = rng.choice(ref.candidates)
        steps.insert(rng.randint(0, n), step_of(action, params))
        return tuple(steps)
    if n == 0:
        return None
    i = rng.randrange(n)
    name, args = steps[i]
    if kind == "drop":
        del steps[i]
    elif kind == "swap":
        if n < 2:
            return None
        j = i + 1 if (i + 1 < n and rng.random() < 0.5) else rng.randrange(n)
        if steps[i] == steps[j]:
            return None
        steps[i], steps[j] = steps[j], steps[i]
    elif kind == "duplicate":
        steps.insert(i + 1, steps[i])
    elif kind == "substitute":
        if not args:
            return None
        k = rng.randrange(len(args))
        others = [o for o in objects if o != args[k]]
        if not others:
            return None
        # Any object at all: sometimes one of the wrong type.
        steps[i] = (name, args[:k] + (rng.choice(others),) + args[k + 1:])
    elif kind == "unknown-object":
        if not args:
            return None
        k = rng.randrange(len(args))
        steps[i] = (name, args[:k] + (_fresh("ghost", objects),) + args[k + 1:])
    elif kind == "unknown-action":
        steps[i] = (_fresh(rng.choice(["teleport", name + "-now"]), list(ref.actions)), args)
    elif kind == "extra-argument":
        steps[i] = (name, args + (rng.choice(objects),))
    elif kind == "missing-argument":
        if not args:
            return None
        k = rng.randrange(len(args))
        steps[i] = (name, args[:k] + args[k + 1:])
    else:
        raise ValueError(f"unknown mutation {kind!r}")
    return tuple(steps)


def _fresh(stem: str, taken: Sequence[str]) -> str:
    taken = set(taken)
    name, n = stem, 1
    while name in taken:
        n += 1
        name = f"{stem}{n}"
    return name


def plan_text(steps: Sequence[Step]) -> str:
    """The steps one call a line, for failure messages."""
    if not steps:
        return "    (empty plan)\n"
    return "".join(f"    {i:>2}: ({' '.join((a, *args))})\n" for i, (a, args) in enumerate(steps, 1))
