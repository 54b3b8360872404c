"""A guesser of our own: anything with ``name``, ``describe()`` and ``async guess(request)``.

This one stands in for a colleague's planning service: it keeps a small book of
known-good plans per problem and, when the feedback says a step failed, it drops
that step and tries the rest. The loop gives it the history of earlier answers and
their feedback in every request, so it needs no state of its own.

    python examples/embedding/custom_guesser.py
"""

from __future__ import annotations

import asyncio
from pathlib import Path

import plansieve
from plansieve.adapters.guesser import Guess, GuessRequest, Usage

HERE = Path(__file__).resolve().parent.parent / "harbour"


class PlanBook:
    name = "plan-book"

    def __init__(self, book: dict[str, str]) -> None:
        self.book = book

    def describe(self) -> dict:
        return {"problems": sorted(self.book)}

    async def guess(self, request: GuessRequest) -> Guess:
        text = self.book.get(request.task.problem.name, "")
        if request.history:  # drop the step the critics complained about, if they named one
            last = request.history[-1]
            lines = [l for l in last.text.splitlines() if l.startswith("(")]
            bad = {f.step for f in last.findings if f.step is not None}
            text = "\n".join(l for i, l in enumerate(lines, 1) if i not in bad)
        return Guess(text=text, usage=Usage(output_tokens=len(text.split())))


async def main() -> None:
    task = plansieve.load_task(HERE / "domain.pddl", HERE / "problem.pddl")
    good = (HERE / "plan-good.plan").read_text()
    # one surplus step in the book's plan: the critics will point at it
    lines = good.splitlines()
    lines.insert(3, "(inspect crate-31 customs-bay)")
    guesser = PlanBook({task.problem.name: "\n".join(lines)})
    outcome = await plansieve.sieve(task, guesser, budget=plansieve.at_most_rounds(3),
                                    feedback="first-problem")
    for s in outcome.summaries:
        print(f"round {s.round}: {'accepted' if s.accepted else 'rejected ' + str(s.codes)}")
    print("verified" if outcome.verified else f"gave up: {outcome.detail}")


if __name__ == "__main__":
    asyncio.run(main())
