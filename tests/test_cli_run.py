"""`plansieve run` from the outside: rounds printed as they happen, exit codes, files written.

The scenario is the harbour demo (examples/harbour, our own invention); the local
guesser's plans are judged by the plan simulator, itself checked against an oracle
in test_oracle_differential.py.
"""

from __future__ import annotations

from pathlib import Path

from plansieve.cli import main
from plansieve.critics.pddl import load_task
from plansieve.critics.plan_text import load_plan
from plansieve.critics.simulator import PlanSimulator
from plansieve.loop.trace_read import read_trace, verify_trace

ROOT = Path(__file__).resolve().parents[1]
HARBOUR = ROOT / "examples" / "harbour"
TASK_ARGS = ["--domain", str(HARBOUR / "domain.pddl"), "--problem", str(HARBOUR / "problem.pddl")]


def cli(capsys, *args: str) -> tuple[int, str, str]:
    try:
        code = main(list(args))
    except SystemExit as e:  # argparse's own usage errors
        code = e.code
    out, err = capsys.readouterr()
    return code, out, err


def test_a_verified_run_exits_0_and_writes_plan_and_trace(capsys, tmp_path):
    trace, plan = tmp_path / "run.jsonl", tmp_path / "out.plan"
    code, out, err = cli(capsys, "run", *TASK_ARGS, "--mistakes", "0.08", "--seed", "3",
                         "--show-feedback", "--trace", str(trace), "--plan-out", str(plan))
    assert code == 0, err
    assert "round 1: rejected" in out and "VERIFIED in round" in out
    assert "| Your plan was not accepted." in out  # --show-feedback
    task = load_task(HARBOUR / "domain.pddl", HARBOUR / "problem.pddl")
    assert PlanSimulator().check(task, load_plan(plan)).passed
    assert verify_trace(trace).intact
    events = read_trace(trace)
    assert events[0].kind == "run-started" and events[-1].kind == "run-finished"
    assert events[-1].verified and str(trace) in out


def test_budget_running_out_exits_1(capsys):
    code, out, _ = cli(capsys, "run", *TASK_ARGS, "--mistakes", "0.3", "--uptake", "0",
                       "--rounds", "2", "--seed", "1", "--feedback", "pass-fail")
    assert code == 1
    assert "NOT VERIFIED: the rounds budget of 2 was used up" in out


def test_guesser_failure_exits_3(capsys, tmp_path):
    # A goal no action can reach: the local planner's search fails, and says why.
    problem = tmp_path / "stuck.pddl"
    problem.write_text((HARBOUR / "problem.pddl").read_text().replace(
        "(inspected reefer-12)", "(inspected reefer-12) (charger north-berth)"))
    code, out, _ = cli(capsys, "run", "--domain", str(HARBOUR / "domain.pddl"),
                       "--problem", str(problem))
    assert code == 3
    assert "NOT VERIFIED" in out and "no plan" in out


def test_usage_and_input_errors_exit_2(capsys, tmp_path):
    assert cli(capsys, "run", *TASK_ARGS, "--rounds", "0")[0] == 2
    assert cli(capsys, "run", *TASK_ARGS, "--feedback", "everything")[0] == 2
    assert cli(capsys, "run", *TASK_ARGS, "--mistakes", "1.5")[0] == 2
    assert cli(capsys, "run", *TASK_ARGS, "--critics", "plan-simulator,oracle")[0] == 2
    # an existing trace is never overwritten
    trace = tmp_path / "old.jsonl"
    trace.write_text("{}\n")
    code, _, err = cli(capsys, "run", *TASK_ARGS, "--trace", str(trace))
    assert code == 2 and "will not be overwritten" in err
    assert trace.read_text() == "{}\n"
    code, _, err = cli(capsys, "run", "--domain", str(tmp_path / "none.pddl"),
                       "--problem", str(HARBOUR / "problem.pddl"))
    assert code == 2 and "none.pddl" in err


def test_help_carries_the_caution(capsys):
    try:
        main(["run", "--help"])
    except SystemExit:
        pass
    out = capsys.readouterr().out
    assert "only as safe as the model" in out and "exit codes" in out
