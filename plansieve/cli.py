"""The ``plansieve`` command line.

Exit codes: 0 the plan is valid, 1 it is not, 2 unreadable input or a usage error.
"""

from __future__ import annotations

import argparse
import os
import sys

from plansieve import __version__

CAUTION = """\
caution: a verified plan is only as safe as the model it was checked against.
A PDDL model leaves out most of the real world. Where plans move people, goods,
vehicles or money, keep the usual human review and engineering safeguards in
place, and follow local regulations and licensed practice."""

EXIT_VALID, EXIT_INVALID, EXIT_INPUT = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # usage errors: exit 2 with a short note
        self.print_usage(sys.stderr)
        self.exit(EXIT_INPUT, f"{self.prog}: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    top = _Parser(
        prog="plansieve",
        description="Check plans against a PDDL model with sound critics.",
        epilog=CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    top.add_argument("--version", action="version", version=f"plansieve {__version__}")
    sub = top.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    check = sub.add_parser(
        "check",
        help="check one plan against a domain and problem (no loop)",
        description="Run the plan simulator on PLAN: every step must be applicable in "
                    "turn and the goal must hold at the end. PLAN is a plan file "
                    "(one '(action arg ...)' a line) or a JSON step list.",
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
    check.set_defaults(handler=_cmd_check)
    return top


def _cmd_check(args: argparse.Namespace) -> int:
    from plansieve.critics.check import check
    from plansieve.critics.pddl import load_task
    from plansieve.critics.plan_text import load_plan, read_plan_auto
    from plansieve.report import CheckDocument, NamedFile, PlanFile, render_check

    task = load_task(args.domain, args.problem)
    if args.plan == "-":
        plan = read_plan_auto(sys.stdin.read(), "<stdin>")
    else:
        plan = load_plan(args.plan)
    result = check(task, plan, keep_going=args.keep_going)
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
