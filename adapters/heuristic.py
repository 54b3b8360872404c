"""The local heuristic guesser: a real planner with a tunable error model.

It finds a correct plan by greedy best-first search (adapters/search.py), then
answers as a planner that makes mistakes at known rates would (adapters/mistakes.py):

* round 1: the correct plan with fresh mistakes;
* a later round after feedback with findings: the previous answer's mistakes stay
  (a planner repeats its errors unless told), and each mistake a finding points at
  is repaired with probability ``uptake``; no new mistakes are made;
* a later round after feedback without findings: the guesser cannot know what was
  wrong, so it answers afresh with new mistakes drawn for that round.

So terse feedback converges slowly and detailed feedback fast, which is what the
retry experiments measure. Every answer is a pure function of the task, the seed,
the round and the history: the previous rounds are recomputed from round 1, with
the findings recorded in the history. If a recorded answer is not the one this
guesser would have given (another guesser's history), its findings cannot be
mapped onto mistakes and that round is treated as one without findings.

The search runs in a worker thread (``asyncio.to_thread``): its cost is not known
in advance and can reach seconds, which must not stall the other loops sharing
the event loop. Its result is cached per task, and concurrent calls for one task
wait for one search. Usage is an estimate: tokens are words (adapters/tokens.py),
cost is 0, seconds are the wall time of the call.
"""

from __future__ import annotations

import asyncio
import math
import random
import time
from dataclasses import dataclass
from typing import Any

from plansieve.adapters.extract import extract_plan
from plansieve.adapters.guesser import Guess, GuesserFailed, GuessRequest, Usage
from plansieve.adapters.mistakes import (
    Mistake, MistakeRates, Vocabulary, realize, repair, sample_mistakes,
)
from plansieve.adapters.search import HEURISTICS, SearchResult, greedy_search, lay_out
from plansieve.adapters.tokens import estimate_tokens
from plansieve.critics.model import Task
from plansieve.critics.plan import Plan, PlanStep

_CACHE_SIZE = 256


@dataclass(frozen=True)
class _Solved:
    task: Task  # kept so that id(task) cannot be reused while the entry lives
    result: SearchResult
    vocab: Vocabulary


def _solve(task: Task, heuristic: str, node_limit: int, seed: int, separation) -> _Solved:
    return _Solved(task, greedy_search(task, heuristic, node_limit, seed, separation),
                   Vocabulary.of(task))


class HeuristicGuesser:
    """Proposes plans found by greedy best-first search, with mistakes made on purpose."""

    name = "heuristic"

    def __init__(self, heuristic: str = "ff", node_limit: int = 50_000, seed: int = 0,
                 mistakes: MistakeRates | dict | None = None, chatter: bool = False,
                 separation: float = 0.01) -> None:
        if heuristic not in HEURISTICS:
            raise ValueError(f"heuristic must be one of {', '.join(HEURISTICS)}, "
                             f"not {heuristic!r}")
        if isinstance(node_limit, bool) or not isinstance(node_limit, int) or node_limit < 1:
            raise ValueError(f"node_limit must be a positive whole number, not {node_limit!r}")
        if isinstance(seed, bool) or not isinstance(seed, int):
            raise ValueError(f"seed must be a whole number, not {seed!r}")
        if (isinstance(separation, bool) or not isinstance(separation, (int, float))
                or not math.isfinite(separation) or separation <= 0):
            raise ValueError(f"separation must be a positive number of time units, "
                             f"not {separation!r}")
        self.heuristic = heuristic
        self.node_limit = node_limit
        self.seed = seed
        # a dict (from a configuration file) is checked field by field, with pydantic's errors
        self.mistakes = MistakeRates.model_validate(mistakes if mistakes is not None else {})
        self.chatter = bool(chatter)
        self.separation = separation
        self._solved: dict[int, _Solved] = {}
        self._running: dict[int, tuple[Task, asyncio.Future]] = {}

    def describe(self) -> dict[str, Any]:
        return {"heuristic": self.heuristic, "node_limit": self.node_limit, "seed": self.seed,
                "mistakes": self.mistakes.model_dump(), "chatter": self.chatter,
                "separation": self.separation}

    async def guess(self, request: GuessRequest) -> Guess:
        started = time.perf_counter()
        solved = await self._solution(request.task)
        if not solved.result.found:
            raise GuesserFailed(solved.result.reason, guesser=self.name)
        text = self._answer(solved, request)
        usage = Usage(input_tokens=estimate_tokens(request.feedback),
                      output_tokens=estimate_tokens(text),
                      seconds=time.perf_counter() - started)
        return Guess(text=text, usage=usage)

    # -- the search, once per task ------------------------------------------------

    async def _solution(self, task: Task) -> _Solved:
        key = id(task)
        got = self._solved.get(key)
        if got is not None and got.task is task:
            return got
        loop = asyncio.get_running_loop()
        running = self._running.get(key)
        if running is not None and running[0] is task and running[1].get_loop() is loop:
            return await asyncio.shield(running[1])
        future = asyncio.ensure_future(asyncio.to_thread(
            _solve, task, self.heuristic, self.node_limit, self.seed, self.separation))
        self._running[key] = (task, future)
        # Runs in the event loop when the search ends: no await between the cache
        # reads and writes, so concurrent guesses never see it half changed.
        future.add_done_callback(lambda f: self._finished(key, task, f))
        return await asyncio.shield(future)

    def _finished(self, key: int, task: Task, future: asyncio.Future) -> None:
        running = self._running.get(key)
        if running is not None and running[1] is future:
            del self._running[key]
        if future.cancelled() or future.exception() is not None:
            return
        if len(self._solved) >= _CACHE_SIZE:
            del self._solved[next(iter(self._solved))]  # the oldest entry
        self._solved[key] = future.result()

    # -- the answer, a pure function of the request -------------------------------

    def _rng(self, task: Task, round_: int, purpose: str) -> random.Random:
        d, p = task.domain.name, task.problem.name
        return random.Random(f"plansieve-guesser/{purpose}/{self.seed}/{d}/{p}/{round_}")

    def _answer(self, solved: _Solved, request: GuessRequest) -> str:
        task, result = request.task, solved.result
        clean, durations = result.steps, result.durations
        rates = self.mistakes

        def fresh(round_: int) -> tuple[Mistake, ...]:
            return sample_mistakes(clean, rates, solved.vocab, self._rng(task, round_, "sample"))

        mistakes = fresh(1)
        for round_ in range(2, request.round + 1):
            before = request.history[round_ - 2] if round_ - 2 < len(request.history) else None
            answer = realize(clean, durations, mistakes)
            findings = tuple(before.findings) if before is not None else ()
            if findings and self._same_plan(before.text, self._steps(result, answer)):
                mistakes = repair(mistakes, answer, findings, rates.uptake,
                                  self._rng(task, round_, "repair"))
            else:
                mistakes = fresh(round_)
        answer = realize(clean, durations, mistakes)
        return self._text(self._steps(result, answer), request.round,
                          self._rng(task, request.round, "chatter"))

    def _steps(self, result: SearchResult, answer) -> tuple[PlanStep, ...]:
        if not result.timed:
            return answer.steps
        return lay_out(answer.steps, answer.durations, result.separation)

    @staticmethod
    def _same_plan(text: str, steps: tuple[PlanStep, ...]) -> bool:
        return extract_plan(text).plan.steps == steps

    def _text(self, steps: tuple[PlanStep, ...], round_: int, rng: random.Random) -> str:
        body = Plan(steps).to_text()
        if not self.chatter:
            return body
        if not steps:
            return "As far as I can tell, no steps are needed.\n"
        intro = rng.choice(_FIRST if round_ == 1 else _LATER)
        outro = rng.choice(_OUTRO)
        style = rng.choice(("plain", "list", "fence"))
        if style == "list":
            body = "".join(f"{i}. {s.to_line()}\n" for i, s in enumerate(steps, 1))
        elif style == "fence":
            body = "```pddl\n" + body + "```\n"
        return f"{intro}\n\n{body}\n{outro}\n"


# Prose around the plan when ``chatter`` is on; no parentheses, so no line reads as a step.
_FIRST = ("Here is a plan that should reach the goal.",
          "I worked through the task; this is the plan I propose.",
          "Plan below, one step a line.")
_LATER = ("Thanks for the feedback. Here is the revised plan.",
          "I have changed the plan where the checks pointed.",
          "Updated plan after your notes:")
_OUTRO = ("Each step is written as a PDDL call.",
          "Let me know if anything needs another look.",
          "That should complete the task.")

