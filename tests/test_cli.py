"""`plansieve check` from the outside: exit codes, the report, JSON, and clean errors."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from plansieve.cli import main

ROOT = Path(__file__).resolve().parents[1]
HARBOUR = ROOT / "examples" / "harbour"
DOMAIN = str(HARBOUR / "domain.pddl")
PROBLEM = str(HARBOUR / "problem.pddl")


def cli(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def test_valid_plan_exits_0_with_an_accepting_report(capsys):
    code, out, err = cli(capsys, "check", "--domain", DOMAIN, "--problem", PROBLEM,
                         str(HARBOUR / "plan-good.plan"))
    assert code == 0, err
    assert "ACCEPTED" in out and "plan-simulator" in out and err == ""


def test_broken_plan_exits_1_and_lists_every_problem_with_keep_going(capsys):
    code, out, _ = cli(capsys, "check", "--keep-going", "--domain", DOMAIN, "--problem", PROBLEM,
                       str(HARBOUR / "plan-broken.plan"))
    assert code == 1
    assert "REJECTED: 3 findings" in out
    # the wrong bay for the inspection, the flat battery, and the inspection never done
    assert "argument-type" in out and "precondition-false" in out and "goal-unmet" in out
    assert "the left side is 3 and the right side 7" in out
    assert "(inspect reefer-12 ?l)" in out  # the hint for the unmet goal
    assert "step 5  (inspect reefer-12 north-berth)   (line 6)" in out


def test_json_output_is_machine_readable(capsys):
    code, out, _ = cli(capsys, "check", "--json", "--domain", DOMAIN, "--problem", PROBLEM,
                       str(HARBOUR / "plan-broken.plan"))
    assert code == 1
    doc = json.loads(out)
    assert doc["format"] == "plansieve.check/1"
    assert doc["passed"] is False
    (verdict,) = doc["verdicts"]
    assert verdict["critic"] == "plan-simulator" and verdict["sound"] is True
    assert [f["code"] for f in verdict["findings"]] == ["argument-type"]
    assert verdict["findings"][0]["step"] == 5


def test_json_step_list_plan_is_accepted(capsys, tmp_path):
    steps = [{"action": "lift", "args": ["carrier-7", "reefer-12", "east-stack"]}]
    plan = tmp_path / "plan.json"
    plan.write_text(json.dumps(steps))
    code, out, _ = cli(capsys, "check", "--json", "--domain", DOMAIN, "--problem", PROBLEM,
                       str(plan))
    assert code == 1
    codes = [f["code"] for f in json.loads(out)["verdicts"][0]["findings"]]
    assert codes == ["goal-unmet"] * 3


def test_unreadable_pddl_exits_2_with_place_and_caret(capsys, tmp_path):
    bad = tmp_path / "problem.pddl"
    bad.write_text(Path(PROBLEM).read_text().replace("(empty carrier-7)", "(empty carrier-9)"))
    code, out, err = cli(capsys, "check", "--domain", DOMAIN, "--problem", str(bad),
                         str(HARBOUR / "plan-good.plan"))
    assert code == 2 and out == ""
    assert f"{bad}:11:" in err and "carrier-9" in err and "^" in err
    assert "Traceback" not in err


def test_unreadable_plan_and_missing_file_exit_2(capsys, tmp_path):
    plan = tmp_path / "p.plan"
    plan.write_text("(lift carrier-7 reefer-12 east-stack)\nlift it now\n")
    code, _, err = cli(capsys, "check", "--domain", DOMAIN, "--problem", PROBLEM, str(plan))
    assert code == 2 and f"{plan}:2:" in err
    code, _, err = cli(capsys, "check", "--domain", DOMAIN, "--problem", PROBLEM,
                       str(tmp_path / "nope.plan"))
    assert code == 2 and "nope.plan" in err


def test_usage_errors_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["check", "--domain", DOMAIN])
    assert exc.value.code == 2
    with pytest.raises(SystemExit) as exc:
        main(["frobnicate"])
    assert exc.value.code == 2


def test_help_carries_the_safety_caution(capsys):
    for argv in (["--help"], ["check", "--help"]):
        with pytest.raises(SystemExit):
            main(argv)
        out = capsys.readouterr().out
        assert "only as safe as the model" in out and "local regulations" in out


def test_console_script_runs_as_a_process():
    # the installed entry point, not just main(): stdin plan, exit code through the shell
    proc = subprocess.run(
        [sys.executable, "-m", "plansieve", "check", "--domain", DOMAIN, "--problem", PROBLEM,
         "-"], input=(HARBOUR / "plan-good.plan").read_text(), capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert "ACCEPTED" in proc.stdout


LIMITS = str(HARBOUR / "limits.toml")


def test_limits_bring_in_the_resource_counter_and_deadline_checker(capsys):
    # The demo's own plans: worked by hand in examples/harbour. The over-budget plan spends
    # 4+6+7+3+4+6 = 30 on lanes, 9 on handling, 4 on two inspections and 3 on a recharge:
    # 44 after its 16th step against a ceiling of 42 credits.
    code, out, _ = cli(capsys, "check", "--domain", DOMAIN, "--problem", PROBLEM,
                       "--limits", LIMITS, str(HARBOUR / "plan-over-budget.plan"))
    assert code == 1
    assert "resource-counter 1.0 (sound): FAIL" in out and "deadline-checker" in out
    assert "crosses its ceiling after step 16" in out
    assert "rises to 44 credits after step 16" in out
    # The late plan inspects reefer-12 at 45 minutes on the shift clock: 20 after 25.
    code, out, _ = cli(capsys, "check", "--json", "--domain", DOMAIN, "--problem", PROBLEM,
                       "--limits", LIMITS, str(HARBOUR / "plan-late.plan"))
    assert code == 1
    doc = json.loads(out)
    by_critic = {v["critic"]: v for v in doc["verdicts"]}
    (entry,) = by_critic["deadline-checker"]["timeline"]
    assert (entry["deadline"], entry["reached_at"], entry["met"]) == (25, 45, False)
    (missed,) = by_critic["deadline-checker"]["findings"]
    assert missed["code"] == "deadline-missed" and missed["late_by"] == 20
    profiles = {p["resource"]: p for p in by_critic["resource-counter"]["profiles"]}
    assert profiles["(total-cost)"]["final"] == 41


def test_critics_option_picks_the_critics(capsys):
    code, out, _ = cli(capsys, "check", "--domain", DOMAIN, "--problem", PROBLEM,
                       "--limits", LIMITS, "--critics", "plan-simulator",
                       str(HARBOUR / "plan-late.plan"))
    assert code == 0 and "deadline-checker" not in out


def test_a_bad_limits_file_names_file_and_field(capsys, tmp_path):
    bad = tmp_path / "limits.toml"
    bad.write_text('[[resource]]\nfluent = "(charge carrier-9)"\nfloor = 3\n')
    code, _, err = cli(capsys, "check", "--domain", DOMAIN, "--problem", PROBLEM,
                       "--limits", str(bad), str(HARBOUR / "plan-good.plan"))
    assert code == 2 and "limits.toml (at resource[0].fluent)" in err and "carrier-9" in err
