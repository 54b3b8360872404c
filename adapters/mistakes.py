"""A planner's mistakes, made on purpose: the error model of the local guesser.

Retry experiments need a guesser whose mistakes are known and tunable. Starting
from a correct plan, each step may be dropped, swapped with its neighbour, given
a wrong argument, or followed by an invented step, each at its own rate. A
guesser told about a specific finding repairs the mistake behind it with
probability ``uptake``.

Mistakes are values (:class:`Mistake`), not edits of text: the answer is always
rebuilt from the correct plan and the set of mistakes still standing, so a
mistake keeps its place while others are repaired, and every answer can be
recomputed from the seed alone.
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from typing import Annotated, Iterable

from pydantic import BaseModel, ConfigDict, Field

from plansieve.critics.grounding import Universe
from plansieve.critics.model import Task
from plansieve.critics.plan import PlanStep

Rate = Annotated[float, Field(ge=0.0, le=1.0)]


class MistakeRates(BaseModel):
    """How often each kind of mistake happens, per step of the correct plan, and how
    often a reported mistake is repaired. Every rate is a probability in [0, 1]."""

    model_config = ConfigDict(frozen=True, extra="forbid", allow_inf_nan=False)

    drop: Rate = Field(0.0, description="a step is left out")
    swap: Rate = Field(0.0, description="a step trades places with the next one")
    wrong_argument: Rate = Field(
        0.0, description="one argument names another object (of the same type half the time)")
    invent: Rate = Field(
        0.0, description="a step is followed by a made-up one: an action the domain does not "
                         "have, or a real action with made-up arguments (half each)")
    uptake: Rate = Field(
        1.0, description="chance that a mistake behind a reported finding is repaired")

    @property
    def any(self) -> bool:
        return any((self.drop, self.swap, self.wrong_argument, self.invent))


@dataclass(frozen=True, order=True)
class Mistake:
    """One mistake against the correct plan.

    ``index`` is the correct plan's 0-based step it concerns (for ``invent``, the
    step the made-up one follows). ``position`` is the argument replaced
    (``wrong-argument``) or the order among steps invented after one step.
    ``replacement`` is the new argument, or the invented step as (action, *args);
    ``duration`` is the invented step's duration in a timed plan.
    """

    index: int
    kind: str  # "drop", "swap", "wrong-argument", "invent"
    position: int = 0
    replacement: tuple[str, ...] = ()
    duration: int | None = None


@dataclass(frozen=True)
class Vocabulary:
    """What the error model knows of a task: its objects, actions and their parameter types."""

    objects: tuple[str, ...]
    # action -> per parameter, the objects it admits
    admits: dict[str, tuple[tuple[str, ...], ...]]
    durative: frozenset[str]

    @classmethod
    def of(cls, task: Task) -> "Vocabulary":
        u = Universe(task)
        schemas = list(task.domain.actions.values()) + list(task.domain.durative_actions.values())
        admits = {s.name: tuple(u.of_types(p.types) for p in s.params) for s in schemas}
        return cls(tuple(u.objects), admits, frozenset(task.domain.durative_actions))


# Made-up names: verbs a planner might invent, and object stems it might imagine.
_VERBS = ("confirm", "wait", "notify", "finish", "prepare", "secure", "verify", "check-all")
_STEMS = ("unit", "spot", "item", "site", "slot")


def sample_mistakes(clean: tuple[PlanStep, ...], rates: MistakeRates, vocab: Vocabulary,
                    rng: random.Random) -> tuple[Mistake, ...]:
    """Fresh mistakes for the correct plan ``clean``, drawn from ``rng``.

    Four passes in a fixed order (drops, wrong arguments, swaps, inventions), so one
    rng state always gives the same mistakes. Swaps pair neighbours among the kept
    steps without overlap; a swap of two equal steps would change nothing and is skipped.
    """
    n = len(clean)
    out: list[Mistake] = []
    dropped = {j for j in range(n) if rng.random() < rates.drop}
    out += [Mistake(j, "drop") for j in sorted(dropped)]
    kept = [j for j in range(n) if j not in dropped]
    for j in kept:
        args = clean[j].args
        if args and rng.random() < rates.wrong_argument:
            pos = rng.randrange(len(args))
            current = args[pos]
            admits = vocab.admits.get(clean[j].action, ())
            same = [o for o in (admits[pos] if pos < len(admits) else ()) if o != current]
            pool = same if same and rng.random() < 0.5 else [o for o in vocab.objects
                                                             if o != current]
            if pool:
                out.append(Mistake(j, "wrong-argument", pos, (rng.choice(pool),)))
    k = 0
    while k + 1 < len(kept):
        a, b = kept[k], kept[k + 1]
        if rng.random() < rates.swap and clean[a] != clean[b]:
            out.append(Mistake(a, "swap"))
            k += 2
        else:
            k += 1
    for j in range(n):
        if rng.random() < rates.invent:
            step, duration = _invented(vocab, rng)
            out.append(Mistake(j, "invent", 0, step, duration))
    return tuple(sorted(out))


def _invented(vocab: Vocabulary, rng: random.Random) -> tuple[tuple[str, ...], int | None]:
    actions = sorted(vocab.admits)
    objects = vocab.objects
    if not actions or rng.random() < 0.5:
        verbs = [v for v in _VERBS if v not in vocab.admits] or [f"{_VERBS[0]}-step"]
        args = tuple(rng.choice(objects) for _ in range(rng.randint(0, 2))) if objects else ()
        return (rng.choice(verbs), *args), None
    action = rng.choice(actions)
    args = []
    for _ in vocab.admits[action]:
        if not objects or rng.random() < 0.25:
            name = f"{rng.choice(_STEMS)}-{rng.randint(1, 99)}"
            args.append(name if name not in objects else f"{name}x")
        else:
            args.append(rng.choice(objects))
    return (action, *args), (1 if action in vocab.durative else None)


@dataclass(frozen=True)
class Answer:
    """The plan a set of mistakes makes of the correct one, and where each mistake shows.

    ``where`` maps each mistake to the 1-based step at which it shows: the changed or
    invented step, the first of a swapped pair, or for a dropped step the step now in
    its place (one past the end when the dropped step was last).
    """

    steps: tuple[PlanStep, ...]
    durations: tuple
    where: dict


def realize(clean: tuple[PlanStep, ...], durations: tuple, mistakes: Iterable[Mistake]) -> Answer:
    """Apply ``mistakes`` to the correct plan."""
    mistakes = sorted(set(mistakes))
    n = len(clean)
    dropped = {m.index for m in mistakes if m.kind == "drop"}
    wrong = {m.index: m for m in mistakes if m.kind == "wrong-argument"}
    order = [j for j in range(n) if j not in dropped]
    pairs: dict[Mistake, tuple[int, int]] = {}
    for m in mistakes:
        if m.kind == "swap" and m.index in order:
            p = order.index(m.index)
            if p + 1 < len(order):
                pairs[m] = (order[p], order[p + 1])
                order[p], order[p + 1] = order[p + 1], order[p]
    kept_sorted = sorted(order)
    invented: dict[int | None, list[Mistake]] = {}
    for m in mistakes:
        if m.kind == "invent":
            anchor = max((k for k in kept_sorted if k <= m.index), default=None)
            invented.setdefault(anchor, []).append(m)

    steps: list[PlanStep] = []
    durs: list = []
    keys: list[float] = []  # each entry's place in the correct plan's numbering
    where: dict[Mistake, int] = {}
    at: dict[int, int] = {}

    def put_invented(anchor):
        for m in invented.get(anchor, ()):
            steps.append(PlanStep(m.replacement[0], tuple(m.replacement[1:])))
            durs.append(m.duration)
            keys.append(m.index + 0.5)
            where[m] = len(steps)

    put_invented(None)
    for j in order:
        step = clean[j]
        if j in wrong:
            m = wrong[j]
            args = list(step.args)
            if m.position < len(args):
                args[m.position] = m.replacement[0]
                where[m] = len(steps) + 1
            step = PlanStep(step.action, tuple(args))
        steps.append(step)
        durs.append(durations[j] if j < len(durations) else None)
        keys.append(j)
        at[j] = len(steps)
        put_invented(j)
    for m, (a, b) in pairs.items():
        where[m] = min(at[a], at[b])
    for m in mistakes:
        if m.kind == "drop":
            before = [i for i, k in enumerate(keys, 1) if k < m.index]
            where[m] = (max(before) if before else 0) + 1
    return Answer(tuple(steps), tuple(durs), where)


def _step_of(finding) -> int | None:
    step = finding.get("step") if isinstance(finding, dict) else getattr(finding, "step", None)
    return step if isinstance(step, int) else None


def repair(mistakes: tuple[Mistake, ...], answer: Answer, findings: Iterable, uptake: float,
           rng: random.Random) -> tuple[Mistake, ...]:
    """The mistakes left after a planner hears ``findings`` about ``answer``.

    Each finding points at the mistake that shows at or most closely before its step
    (a finding about the end state, at the last one); with no mistake that early, at
    the first. Every mistake pointed at is repaired with probability ``uptake`` —
    one draw per mistake however many findings point at it. Nothing new goes wrong.
    """
    shown = [(w, m) for m, w in answer.where.items()]
    if not shown:
        return tuple(mistakes)
    targets = set()
    for f in findings:
        step = _step_of(f)
        limit = float("inf") if step is None else step
        earlier = [(w, m) for w, m in shown if w <= limit]
        targets.add(max(earlier)[1] if earlier else min(shown)[1])
    fixed = {m for m in sorted(targets) if rng.random() < uptake}
    return tuple(m for m in mistakes if m not in fixed)
