"""``plansieve run`` and ``plansieve config check``: settings from the configuration file
and the command line, then the loop on one task, printed round by round for a person."""

from __future__ import annotations

import argparse
import os
import re
import sys
import uuid

from plansieve.adapters.config_file import RunConfig
from plansieve.critics.errors import InputError, PlansieveError, Spot
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


# -- settings: the configuration file, then the command line over it -------------------------

_LOCAL_FLAGS = (("seed", "--seed"), ("mistakes", "--mistakes"), ("uptake", "--uptake"))


def retry_line(event) -> str:
    """One failed try that will be tried again: round, try, why, and the wait."""
    wait = f"; trying again in {event.wait_seconds:.2g} s" if event.wait_seconds else \
        "; trying again"
    return f"round {event.round}, try {event.attempt} failed: {event.reason}{wait}"


def config_for(args: argparse.Namespace) -> RunConfig:
    """The configuration named by --config, else plansieve.toml here if present, else
    the defaults."""
    from plansieve.adapters.config_file import load_config
    from plansieve.cli import DEFAULT_CONFIG
    if args.config:
        return load_config(args.config)
    if os.path.isfile(DEFAULT_CONFIG):
        return load_config(DEFAULT_CONFIG)
    return RunConfig()


def apply_flags(config: RunConfig, args: argparse.Namespace) -> RunConfig:
    """``config`` with every option given on the command line put in its place."""
    from plansieve.adapters.config_file import MistakeKinds

    def section(part, **changes):
        changes = {k: v for k, v in changes.items() if v is not None}
        return part.model_copy(update=changes) if changes else part

    g = config.guesser
    kind = args.guesser or g.kind
    if kind == "http":
        given = [flag for key, flag in _LOCAL_FLAGS if getattr(args, key) is not None]
        if given:
            verb = "applies" if len(given) == 1 else "apply"
            raise PlansieveError(f"{', '.join(given)} only {verb} to the local guesser; the "
                                 "guesser in use is 'http'")
        if g.http is None:
            where = (f"the configuration file {config.source}" if config.source
                     else "a configuration file (--config FILE)")
            raise PlansieveError(f"the http guesser needs a [guesser.http] table with its url "
                                 f"in {where}")
    mistakes = (MistakeKinds(**{k: args.mistakes for k in MistakeKinds.model_fields})
                if args.mistakes is not None else None)
    updated = config.model_copy(update={
        "task": section(config.task, domain=args.domain, problem=args.problem),
        "guesser": g.model_copy(update={"kind": kind, "local": section(
            g.local, seed=args.seed, uptake=args.uptake, mistakes=mistakes)}),
        "critics": section(config.critics, limits=args.limits, names=args.critics,
                           run_all=args.run_all),
        "feedback": section(config.feedback, level=args.feedback),
        "budget": section(config.budget, rounds=args.rounds, seconds=args.seconds,
                          tokens=args.tokens, cost=args.cost),
        "trace": section(config.trace, path=args.trace),
    })
    return updated.with_source(config.source)


def load_task_of(config: RunConfig) -> tuple[Task, list]:
    """The task the configuration names, with its limits, and the critics to run on it."""
    from plansieve.critics.limits import attach_limits, load_limits
    from plansieve.critics.pddl import load_task
    from plansieve.critics.select import critics_for

    t = config.task
    if not t.domain or not t.problem:
        missing = " and ".join(n for n in ("domain", "problem") if not getattr(t, n))
        raise PlansieveError(f"no {missing} file: give --domain and --problem, or domain and "
                             "problem in the [task] table of the configuration file")
    task = load_task(t.domain, t.problem)
    limits = config.critics.limits
    if limits:
        task = attach_limits(task, load_limits(limits), limits)
    keep_going = config.feedback.level in ("all-problems", "all-with-fixes")
    return task, critics_for(task, keep_going=keep_going, names=config.critics.names)


def prepare_run(args: argparse.Namespace) -> tuple[RunConfig, Task, list]:
    config = apply_flags(config_for(args), args)
    task, critics = load_task_of(config)
    return config, task, critics


_ENV_REF = re.compile(r"(?<!\$)\$\{([A-Za-z_][A-Za-z0-9_]*)\}")


def check_config_file(path: str) -> tuple[str, list[str]]:
    """Everything ``run`` would check before its first round, without running: the file,
    the files it names, the guesser's set-up and the trace key. Returns the effective
    settings (masked) and a few notes; raises InputError at the first problem."""
    from plansieve.adapters.config_file import (
        effective_text, load_config, make_guesser, trace_key,
    )
    from plansieve.critics.limits import load_limits

    config = load_config(path)
    notes = []
    t = config.task
    if t.domain and t.problem:
        task, critics = load_task_of(config)
        notes.append(f"task: {task.problem.name} ({task.domain.name}) read; critics "
                     f"{', '.join(c.name for c in critics)}")
    else:
        if config.critics.limits:
            load_limits(config.critics.limits)
        notes.append("task: not (fully) given; run needs --domain and --problem")
    guesser = make_guesser(config)
    if config.guesser.kind == "http":
        http = config.guesser.http
        names = sorted({m.group(1) for text in (http.url, *http.headers.values())
                        for m in _ENV_REF.finditer(text)})
        using = f"; environment variables used: {', '.join(names)} (set)" if names else ""
        notes.append(f"guesser: http, prompt templates read{using}; nothing was sent")
    else:
        notes.append(f"guesser: {guesser.name} (local)")
    key = trace_key(config)
    if config.trace.path:
        folder = os.path.dirname(config.trace.path) or "."
        if not os.path.isdir(folder):
            raise InputError(Spot(path, None, None,
                                  f"the trace's folder {folder} does not exist",
                                  field="trace.path"))
        signed = (f"signed with the key in {config.trace.key_env}" if key else
                  f"not signed ({config.trace.key_env} is not set)")
        size = os.path.getsize(config.trace.path) if os.path.isfile(config.trace.path) else 0
        if size:
            signed += (f"; the file already holds {size} bytes and a run will not overwrite "
                       "it: move it away or choose another path")
        notes.append(f"trace: {config.trace.path}, {signed}")
    return effective_text(config), notes


# -- the run -----------------------------------------------------------------------------------


async def run_command(config: RunConfig, task: Task, critics: list,
                      args: argparse.Namespace) -> int:
    """Run the loop as ``config`` says; ``args`` only shapes what is printed and written."""
    from plansieve.adapters.config_file import make_guesser, make_trace
    from plansieve.cli import EXIT_GUESSER, EXIT_INVALID, EXIT_VALID
    from plansieve.loop.chain import CriticChain
    from plansieve.loop.engine import sieve
    from plansieve.loop.trace import CallbackSink

    budget = config.budget.budget()
    level = config.feedback.level
    say = (lambda text: None) if args.quiet else (lambda text: print(text, flush=True))

    def on_round(s: RoundSummary) -> None:
        say(round_line(s))
        if args.show_feedback and s.feedback:
            say("".join(f"    | {line}\n" for line in s.feedback.splitlines()).rstrip("\n"))

    def show_retry(event) -> None:
        # the guesser's failed tries, as they happen (rounds are shown by on_round)
        if event.kind == "guess-failed" and event.retry:
            say(retry_line(event))

    guesser = make_guesser(config)
    try:
        chain = CriticChain(critics, run_all=config.critics.run_all)
        if config.source:
            say(f"configuration: {config.source}")
        who = guesser.name
        if config.guesser.kind == "http":
            from plansieve.adapters.secrets import mask_url
            who += f" ({config.guesser.http.method} {mask_url(config.guesser.http.url)})"
        say(f"plansieve run: {task.problem.name} ({task.domain.name}), guesser {who}, "
            f"feedback {level}, budget {budget}")
        say(f"critics: {', '.join(l.critic.name for l in chain.links)}")
        trace = make_trace(config, uuid.uuid4().hex, also=[CallbackSink(show_retry)])
        try:
            outcome = await sieve(
                task, guesser, critics=chain, feedback=level, budget=budget, trace=trace,
                seed=config.guesser.local.seed if config.guesser.kind == "local" else None,
                task_id=config.task.id or os.path.basename(config.task.problem or "task"),
                prices=config.budget.prices, on_round=on_round)
        finally:
            if trace is not None:
                trace.close()
    finally:
        close = getattr(guesser, "aclose", None)
        if close is not None:
            await close()
    _report(outcome, config, args, keyed=trace is not None and trace.keyed)
    if outcome.verified:
        return EXIT_VALID
    return EXIT_GUESSER if outcome.stop == "guesser-failed" else EXIT_INVALID


def _report(outcome: Outcome, config: RunConfig, args: argparse.Namespace, *,
            keyed: bool) -> None:
    t = outcome.totals
    cost = f", cost {t.cost:.4g}" if t.cost else ""
    spent = (f"{t.guesser_calls} guesser call(s), {t.tokens} tokens{cost}, "
             f"{t.seconds:.2f} s")
    if outcome.verified:
        print(f"\nVERIFIED in round {outcome.rounds} ({spent}). The plan:")
        for line in (outcome.plan_text or "").splitlines():
            print(f"  {line}")
        if args.plan_out:
            try:
                with open(args.plan_out, "w", encoding="utf-8") as f:
                    f.write(outcome.plan_text or "")
            except OSError as e:
                raise InputError(Spot(args.plan_out, None, None,
                                      f"cannot write the plan: {e.strerror or e}")) from None
            print(f"plan written to {args.plan_out}")
    else:
        print(f"\nNOT VERIFIED: {outcome.detail} ({spent}).", file=sys.stdout)
    if config.trace.path:
        signed = " with an HMAC" if keyed else ""
        print(f"trace: {config.trace.path} (hash-chained{signed}; run id {outcome.run_id})")
