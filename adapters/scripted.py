"""The scripted guesser: answers written in advance, one per round.

For tests and demonstrations of the loop, where the answers must be known: round
``n`` gets the ``n``-th answer. The answer depends on the round alone, so one
instance can serve many loops at once. Past the last answer it fails, as a real
guesser that has nothing more to say would.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from typing import Any

from plansieve.adapters.guesser import Guess, GuesserFailed, GuessRequest, Usage
from plansieve.adapters.tokens import estimate_tokens


class ScriptedGuesser:
    """Returns ``answers[round - 1]``; ``usages``, if given, says what each answer cost.

    Without ``usages`` a call costs its estimated tokens (words of the feedback in,
    words of the answer out), no money, and its wall time.
    """

    name = "scripted"

    def __init__(self, answers: Sequence[str], usages: Sequence[Usage] | None = None) -> None:
        if isinstance(answers, str):
            raise TypeError("answers must be a list of answer texts, not one string")
        self.answers = tuple(str(a) for a in answers)
        if usages is not None:
            usages = tuple(usages)
            if len(usages) != len(self.answers):
                raise ValueError(f"usages must give one Usage per answer: {len(self.answers)} "
                                 f"answers, {len(usages)} usages")
        self.usages = usages

    def describe(self) -> dict[str, Any]:
        return {"answers": len(self.answers), "usages": self.usages is not None}

    async def guess(self, request: GuessRequest) -> Guess:
        started = time.perf_counter()
        n = request.round
        if n < 1:
            raise GuesserFailed(f"round numbers start at 1, not {n}", guesser=self.name)
        if n > len(self.answers):
            raise GuesserFailed(f"script exhausted: it holds {len(self.answers)} answer(s) "
                                f"and round {n} asked for another", guesser=self.name)
        text = self.answers[n - 1]
        if self.usages is not None:
            usage = self.usages[n - 1]
        else:
            usage = Usage(input_tokens=estimate_tokens(request.feedback),
                          output_tokens=estimate_tokens(text),
                          seconds=time.perf_counter() - started)
        return Guess(text=text, usage=usage)
