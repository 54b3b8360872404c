"""``plansieve run``: the loop on one task, printed round by round for a person."""

from __future__ import annotations

import argparse
import os
import sys
import uuid

from plansieve.critics.model import Task
from plansieve.loop.outcome import Outcome, RoundSummary

_SAID = {  # finding codes in a few words, for the one-line round summary
    "action-unknown": "unknown action", "arity-mismatch": "wrong number of arguments",
    "object-unknown": "unknown object", "argument-type": "argument of the wrong type",
    "precondition-false": "precondition false", "fluent-undefined": "fluent without value",
    "division-by-zero": "division by zero", "effect-conflict": "conflicting effects",
    "goal-unmet": "goal not reached", "limit-crossed": "resource limit crossed",
    "deadline-missed": "deadline missed", "window-violated": "outside a time window",
    "invariant-broken": "invariant broken", "duration-out-of-bounds": "bad duration",
    "happenings-too-close": "happenings too close", "constraint-violated": "constraint broken",
    "makespan-over": "plan too long",
}


def round_line(s: RoundSummary) -> str:
    head = f"round {s.round}: "
    if s.accepted:
        return head + f"accepted ({s.steps} steps)"
    if s.steps == 0:
        return head + "rejected, no plan steps could be read from the answer"
    seen: dict[str, int] = {}
    for c in s.codes:
        seen[c] = seen.get(c, 0) + 1
    what = ", ".join(f"{_SAID.get(c, c)}" + (f" x{n}" if n > 1 else "") for c, n in seen.items())
    unread = f", {s.unread} unreadable line(s)" if s.unread else ""
    by = f" [{', '.join(s.failed)}]" if s.failed else ""
    return head + f"rejected, {s.steps} steps: {what or 'unreadable lines'}{unread}{by}"


def _guesser(args: argparse.Namespace):
    from plansieve.adapters.heuristic import HeuristicGuesser
    from plansieve.adapters.mistakes import MistakeRates
    r = args.mistakes
    return HeuristicGuesser(seed=args.seed, mistakes=MistakeRates(
        drop=r, swap=r, wrong_argument=r, invent=r, uptake=args.uptake))


def _trace(args: argparse.Namespace):
    if not args.trace:
        return None
    from plansieve.loop.trace import FileSink, TraceWriter, key_from_env
    return TraceWriter(FileSink(args.trace), run_id=uuid.uuid4().hex, hmac_key=key_from_env())


async def run_command(args: argparse.Namespace, task: Task, critics: list) -> int:
    from plansieve.cli import EXIT_GUESSER, EXIT_INVALID, EXIT_VALID
    from plansieve.loop.budget import budget_of
    from plansieve.loop.chain import CriticChain
    from plansieve.loop.engine import sieve

    budget = budget_of(rounds=args.rounds, seconds=args.seconds, tokens=args.tokens,
                       cost=args.cost)
    guesser = _guesser(args)
    say = (lambda text: None) if args.quiet else (lambda text: print(text, flush=True))

    def on_round(s: RoundSummary) -> None:
        say(round_line(s))
        if args.show_feedback and s.feedback:
            say("".join(f"    | {line}\n" for line in s.feedback.splitlines()).rstrip("\n"))

    chain = CriticChain(critics, run_all=args.run_all)
    say(f"plansieve run: {task.problem.name} ({task.domain.name}), guesser {guesser.name}, "
        f"feedback {args.feedback}, budget {budget}")
    say(f"critics: {', '.join(l.critic.name for l in chain.links)}")
    trace = _trace(args)
    try:
        outcome = await sieve(task, guesser, critics=chain, feedback=args.feedback,
                              budget=budget, trace=trace, seed=args.seed,
                              task_id=os.path.basename(args.problem),
                              on_round=on_round)
    finally:
        if trace is not None:
            trace.close()
    _report(outcome, args)
    if outcome.verified:
        return EXIT_VALID
    return EXIT_GUESSER if outcome.stop == "guesser-failed" else EXIT_INVALID


def _report(outcome: Outcome, args: argparse.Namespace) -> None:
    t = outcome.totals
    cost = f", cost {t.cost:.4g}" if t.cost else ""
    spent = (f"{t.guesser_calls} guesser call(s), {t.tokens} tokens{cost}, "
             f"{t.seconds:.2f} s")
    if outcome.verified:
        print(f"\nVERIFIED in round {outcome.rounds} ({spent}). The plan:")
        for line in (outcome.plan_text or "").splitlines():
            print(f"  {line}")
        if args.plan_out:
            from plansieve.critics.errors import InputError, Spot
            try:
                with open(args.plan_out, "w", encoding="utf-8") as f:
                    f.write(outcome.plan_text or "")
            except OSError as e:
                raise InputError(Spot(args.plan_out, None, None,
                                      f"cannot write the plan: {e.strerror or e}")) from None
            print(f"plan written to {args.plan_out}")
    else:
        print(f"\nNOT VERIFIED: {outcome.detail} ({spent}).", file=sys.stdout)
    if args.trace:
        keyed = " with an HMAC" if os.environ.get("PLANSIEVE_TRACE_KEY") else ""
        print(f"trace: {args.trace} (hash-chained{keyed}; run id {outcome.run_id})")
