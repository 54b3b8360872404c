"""The ``plansieve`` command line.

``check``: 0 the plan is valid, 1 it is not, 2 unreadable input or a usage error.
``run``: 0 a plan was verified, 1 the budget ran out first, 2 unreadable input or a
usage error, 3 the guesser failed.
``config check``: 0 the configuration file is valid, 2 it is not.
"""

from __future__ import annotations

import argparse
import os
import sys
import textwrap

from plansieve import __version__

CAUTION = """\
caution: a verified plan is only as safe as the model it was checked against.
A PDDL model leaves out most of the real world. Where plans move people, goods,
vehicles or money, keep the usual human review and engineering safeguards in
place, and follow local regulations and licensed practice."""

EXIT_VALID, EXIT_INVALID, EXIT_INPUT, EXIT_GUESSER = 0, 1, 2, 3

# read by ``run`` from the current folder when no --config is given
DEFAULT_CONFIG = "plansieve.toml"


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # usage errors: exit 2 with a short note
        self.print_usage(sys.stderr)
        self.exit(EXIT_INPUT, f"{self.prog}: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    top = _Parser(
        prog="plansieve",
        description="Check plans against a PDDL model with sound critics, alone (check) or "
                    "in a generate-and-test loop with a guesser (run).",
        epilog=CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    top.add_argument("--version", action="version", version=f"plansieve {__version__}")
    sub = top.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    check = sub.add_parser(
        "check",
        help="check one plan against a domain and problem (no loop)",
        description="Judge PLAN with the critics the task calls for: the plan simulator "
                    "(every step applicable in turn, the goal true at the end), and when the "
                    "task has resource bounds or time in it, the resource counter and the "
                    "deadline checker. PLAN is a plan file (one '(action arg ...)' a line, "
                    "optionally 'time: (action arg ...) [duration]') or a JSON step list.",
        epilog=CAUTION + "\n\nexit codes: 0 valid, 1 not valid, 2 unreadable input or usage error",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    check.add_argument("--domain", required=True, metavar="FILE", help="PDDL domain file")
    check.add_argument("--problem", required=True, metavar="FILE", help="PDDL problem file")
    check.add_argument("plan", metavar="PLAN", help="plan file or JSON step list ('-' for stdin)")
    check.add_argument("--json", action="store_true", help="print the result as JSON")
    check.add_argument("--keep-going", action="store_true",
                       help="after a failing step, carry on as if it had worked, "
                            "so one run reports every problem it can")
    _add_task_options(check)
    check.set_defaults(handler=_cmd_check)

    run = sub.add_parser(
        "run",
        help="propose plans with a guesser and check them until one is verified",
        description=_paragraphs(
            "The generate-and-test loop: a guesser proposes a plan, the critics check it, "
            "their findings go back to the guesser as feedback, and the loop stops at the "
            "first plan every sound critic accepts or when the budget runs out. Each round "
            "is printed as it happens.",
            f"Settings come from a configuration file: --config FILE, or {DEFAULT_CONFIG} in "
            "the current folder when it exists and --config is not given (see 'plansieve "
            "config check'). Options given here override the file; the defaults below apply "
            "when neither gives a value."),
        epilog=CAUTION + "\n\nexit codes: 0 a plan was verified, 1 the budget ran out first, "
                         "2 unreadable input or usage error, 3 the guesser failed",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    run.add_argument("--config", metavar="FILE",
                     help=f"configuration file (TOML); default: {DEFAULT_CONFIG} in the current "
                          "folder, if there is one")
    run.add_argument("--domain", metavar="FILE",
                     help="PDDL domain file (or [task] domain in the configuration)")
    run.add_argument("--problem", metavar="FILE",
                     help="PDDL problem file (or [task] problem in the configuration)")
    run.add_argument("--guesser", choices=["local", "http"],
                     help="who proposes plans: 'local' is the built-in heuristic planner (no "
                          "network, the default); 'http' asks the endpoint in the "
                          "configuration's [guesser.http] table")
    run.add_argument("--rounds", type=_positive_int, metavar="N",
                     help="give up after N rounds; retried tries within a round do not "
                          "count (default 5)")
    run.add_argument("--seconds", type=_positive_float, metavar="S",
                     help="give up after S seconds of wall time")
    run.add_argument("--tokens", type=_positive_int, metavar="N",
                     help="give up once the guesser has used N tokens")
    run.add_argument("--cost", type=_positive_float, metavar="X",
                     help="give up once the guesser calls have cost X")
    run.add_argument("--feedback", metavar="LEVEL",
                     choices=["pass-fail", "first-problem", "all-problems", "all-with-fixes"],
                     help="how much the guesser is told about a rejected plan: pass-fail, "
                          "first-problem, all-problems or all-with-fixes (default)")
    run.add_argument("--seed", type=int, metavar="S",
                     help="seed for the local guesser (default 0)")
    run.add_argument("--mistakes", type=_rate, metavar="RATE",
                     help="local guesser: chance per step of each kind of mistake "
                          "(dropped, swapped, wrong argument, invented step); default 0")
    run.add_argument("--uptake", type=_rate, metavar="RATE",
                     help="local guesser: chance it repairs a problem it is told about "
                          "(default 0.7)")
    run.add_argument("--trace", metavar="FILE",
                     help="write the trace (JSON Lines, hash-chained) to FILE; an HMAC is "
                          "added when PLANSIEVE_TRACE_KEY (or the configuration's "
                          "trace.key_env) is set")
    run.add_argument("--plan-out", metavar="FILE", help="write the verified plan to FILE")
    run.add_argument("--run-all", action="store_true", default=None,
                     help="ask every critic each round, not only up to the first that fails")
    run.add_argument("--show-feedback", action="store_true",
                     help="also print the feedback text sent back after each rejected round")
    run.add_argument("--quiet", action="store_true", help="print only the result")
    _add_task_options(run)
    run.set_defaults(handler=_cmd_run)

    config = sub.add_parser(
        "config",
        help="work with a configuration file (check it)",
        description="Configuration files hold the settings of 'plansieve run' in TOML.",
        epilog=CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    config_sub = config.add_subparsers(dest="config_command", metavar="ACTION",
                                       parser_class=_Parser)
    config_sub.required = True
    config_check = config_sub.add_parser(
        "check",
        help="validate a configuration file without running anything",
        description="Read FILE, check every key and value, the files it names (task, limits, "
                    "prompt templates) and the environment variables it refers to, then "
                    "print the settings in force: defaults filled in, preset shapes spelled "
                    "out, paths resolved, credentials masked. Nothing is sent anywhere.",
        epilog=CAUTION + "\n\nexit codes: 0 the file is valid, 2 it is not (or cannot be "
                         "read)",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    config_check.add_argument("file", metavar="FILE", nargs="?", default=DEFAULT_CONFIG,
                              help=f"the configuration file (default: {DEFAULT_CONFIG})")
    config_check.set_defaults(handler=_cmd_config_check)
    return top


def _paragraphs(*texts: str) -> str:
    return "\n\n".join(textwrap.fill(t, 80) for t in texts)


def _add_task_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--limits", metavar="FILE",
                   help="limits file (TOML or JSON): resource bounds, deadlines, time settings")
    p.add_argument("--critics", type=_critic_list, metavar="NAMES",
                   help="comma-separated critics to run: plan-simulator, resource-counter, "
                        "deadline-checker (default: those the task calls for)")


def _positive_int(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"expected a number of at least 1, got {n}")
    return n


def _float_where(text: str, fits, expected: str) -> float:
    try:
        x = float(text)
    except ValueError:
        x = None
    if x is None or not fits(x):
        raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}")
    return x


def _positive_float(text: str) -> float:
    return _float_where(text, lambda x: 0 < x < float("inf"), "a positive finite number")


def _rate(text: str) -> float:
    return _float_where(text, lambda x: 0 <= x <= 1, "a number from 0 to 1")


def _critic_list(text: str) -> list[str]:
    from plansieve.critics.select import CRITIC_NAMES
    names = [n.strip() for n in text.split(",") if n.strip()]
    bad = [n for n in names if n not in CRITIC_NAMES]
    if bad or not names:
        raise argparse.ArgumentTypeError(
            f"unknown critic {', '.join(bad) or '(none given)'}; expected a comma-separated "
            f"list of {', '.join(CRITIC_NAMES)}")
    return names


def _load(args: argparse.Namespace):
    """The task with its limits, and the critics to run on it."""
    from plansieve.critics.limits import attach_limits, load_limits
    from plansieve.critics.pddl import load_task
    from plansieve.critics.select import critics_for

    task = load_task(args.domain, args.problem)
    if args.limits:
        task = attach_limits(task, load_limits(args.limits), args.limits)
    keep_going = getattr(args, "keep_going", False) or \
        getattr(args, "feedback", "") in ("all-problems", "all-with-fixes")
    return task, critics_for(task, keep_going=keep_going, names=args.critics)


def _cmd_check(args: argparse.Namespace) -> int:
    from plansieve.critics.check import check
    from plansieve.critics.plan_text import load_plan, read_plan_auto
    from plansieve.report import CheckDocument, NamedFile, PlanFile, render_check

    task, critics = _load(args)
    if args.plan == "-":
        plan = read_plan_auto(sys.stdin.read(), "<stdin>")
    else:
        plan = load_plan(args.plan)
    result = check(task, plan, critics)
    if args.json:
        doc = CheckDocument(
            domain=NamedFile(file=args.domain, name=task.domain.name),
            problem=NamedFile(file=args.problem, name=task.problem.name),
            plan=PlanFile(file=args.plan, steps=len(plan)),
            passed=result.passed, verdicts=result.verdicts)
        print(doc.model_dump_json(indent=2))
    else:
        sys.stdout.write(render_check(
            result, plan,
            domain=f"{args.domain}  [{task.domain.name}]",
            problem=f"{args.problem}  [{task.problem.name}]",
            plan_name=args.plan))
    return EXIT_VALID if result.passed else EXIT_INVALID


def _cmd_run(args: argparse.Namespace) -> int:
    import asyncio

    from plansieve.run_cli import prepare_run, run_command
    config, task, critics = prepare_run(args)
    return asyncio.run(run_command(config, task, critics, args))


def _cmd_config_check(args: argparse.Namespace) -> int:
    from plansieve.critics.errors import InputError
    from plansieve.run_cli import check_config_file
    try:
        text, notes = check_config_file(args.file)
    except InputError as exc:
        print(f"plansieve: {args.file} is not a valid configuration\n{exc.render()}",
              file=sys.stderr)
        return EXIT_INPUT
    print(f"{args.file}: valid.")
    for note in notes:
        print(note)
    print("\nThe settings in force (defaults filled in, credentials masked):\n")
    sys.stdout.write(text)
    return EXIT_VALID


def main(argv: list[str] | None = None) -> int:
    from plansieve.critics.errors import InputError, PlansieveError

    args = build_parser().parse_args(argv)
    try:
        return args.handler(args)
    except InputError as exc:
        print(f"plansieve: cannot read the input\n{exc.render()}", file=sys.stderr)
        return EXIT_INPUT
    except PlansieveError as exc:
        print(f"plansieve: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return EXIT_VALID
    except Exception as exc:  # a bug of ours: say so briefly, full detail on request
        if os.environ.get("PLANSIEVE_DEBUG"):
            raise
        print(f"plansieve: internal error ({type(exc).__name__}: {exc}). This is a bug in "
              "plansieve; run again with PLANSIEVE_DEBUG=1 for the details and report it.",
              file=sys.stderr)
        return 70


if __name__ == "__main__":
    raise SystemExit(main())
