"""`plansieve config check` and `plansieve run --config` from the outside.

The endpoint is mocked with respx (HTTP semantics: RFC 9110; the chat-messages answer
shape is our preset's, adapters/http_settings.py); the plans it answers with are the
harbour example's (examples/harbour, our own invention), judged by the plan simulator,
itself checked against an oracle in test_oracle_differential.py.
"""

from __future__ import annotations

import json
from pathlib import Path

import httpx
import pytest
import respx

from plansieve.cli import main
from plansieve.loop.trace_read import read_trace, verify_trace

ROOT = Path(__file__).resolve().parents[1]
HARBOUR = ROOT / "examples" / "harbour"
EXAMPLE = ROOT / "examples" / "local-model" / "plansieve.toml"
GOOD_PLAN = (HARBOUR / "plan-good.plan").read_text()
URL = "http://127.0.0.1:8089/v1/chat/completions"
KEY = "pk-veyrun-7f3a9c2e"  # a made-up key; it must appear nowhere we write


def cli(capsys, *args: str) -> tuple[int, str, str]:
    try:
        code = main(list(args))
    except SystemExit as e:  # argparse's own usage errors and --help
        code = e.code
    out, err = capsys.readouterr()
    return code, out, err


def write_config(folder: Path, extra: str = "", *, kind: str = "http") -> Path:
    path = folder / "plansieve.toml"
    path.write_text(f"""\
[task]
domain = "{(HARBOUR / 'domain.pddl').as_posix()}"
problem = "{(HARBOUR / 'problem.pddl').as_posix()}"

[guesser]
kind = "{kind}"

[guesser.local]
seed = 3
mistakes = 0.08

[guesser.http]
url = "{URL}"
model = "harbour-planner"

[guesser.http.headers]
Authorization = "Bearer ${{PLANNER_API_KEY}}"

[guesser.http.retries]
attempts = 2
first_wait = 0.01

[critics]
limits = "{(HARBOUR / 'limits.toml').as_posix()}"

[budget]
rounds = 4
{extra}""")
    return path


def chat_answer(text: str, prompt_tokens: int = 1000, completion_tokens: int = 500):
    return httpx.Response(200, json={
        "choices": [{"index": 0, "message": {"role": "assistant", "content": text}}],
        "usage": {"prompt_tokens": prompt_tokens, "completion_tokens": completion_tokens}})


# -- config check ---------------------------------------------------------------------------------


def test_the_example_config_checks(capsys, monkeypatch):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    code, out, err = cli(capsys, "config", "check", str(EXAMPLE))
    assert code == 0, out + err
    assert f"{EXAMPLE}: valid." in out
    assert "tuesday-night-shift (veyrun-harbour) read" in out
    assert "PLANNER_API_KEY (set)" in out and "nothing was sent" in out
    assert 'Authorization = "Bearer ${PLANNER_API_KEY}"' in out
    assert 'preset = "chat-messages"' in out and 'text = "choices[0].message.content"' in out
    assert KEY not in out + err


def test_a_missing_variable_fails_the_check_with_its_key_and_line(capsys, monkeypatch):
    monkeypatch.delenv("PLANNER_API_KEY", raising=False)
    code, out, err = cli(capsys, "config", "check", str(EXAMPLE))
    assert code == 2 and out == ""
    line = EXAMPLE.read_text().splitlines().index(
        'Authorization = "Bearer ${PLANNER_API_KEY}"') + 1
    assert f"{EXAMPLE}:{line} (at guesser.http.headers.Authorization)" in err
    assert "PLANNER_API_KEY is not set" in err


def test_a_bad_file_fails_the_check_naming_key_value_and_choices(capsys, tmp_path):
    path = tmp_path / "plansieve.toml"
    path.write_text('[guesser]\nkind = "local"\n[guesser.http]\nurl = "http://h"\n'
                    '[guesser.http.retries]\nattempts = 0\n[feedback]\nlevel = "all"\n')
    code, out, err = cli(capsys, "config", "check", str(path))
    assert code == 2 and out == ""
    assert f"{path} is not a valid configuration" in err
    assert f"{path}:6 (at guesser.http.retries.attempts): expected a number of 1 or more " \
           "(got 0)" in err
    assert f"{path}:8 (at feedback.level): expected one of pass-fail, first-problem, " \
           "all-problems, all-with-fixes (got 'all')" in err
    assert "Traceback" not in err


def test_check_reads_the_files_the_config_names(capsys, tmp_path):
    path = tmp_path / "plansieve.toml"
    path.write_text('[task]\ndomain = "nowhere/domain.pddl"\nproblem = "p.pddl"\n')
    code, _, err = cli(capsys, "config", "check", str(path))
    assert code == 2 and str(tmp_path / "nowhere" / "domain.pddl") in err
    path.write_text('[trace]\npath = "no-such-folder/t.jsonl"\n')
    code, _, err = cli(capsys, "config", "check", str(path))
    assert code == 2 and "(at trace.path)" in err and "does not exist" in err


def test_check_without_a_file_and_with_a_missing_one(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, _, err = cli(capsys, "config", "check")
    assert code == 2 and "plansieve.toml: no such file" in err
    (tmp_path / "plansieve.toml").write_text("[budget]\nrounds = 2\n")
    code, out, _ = cli(capsys, "config", "check")
    assert code == 0 and "rounds = 2" in out and 'kind = "local"' in out


def test_help_names_the_default_file_and_carries_the_caution(capsys):
    code, out, _ = cli(capsys, "run", "--help")
    assert code == 0
    flat = " ".join(out.split())
    assert "plansieve.toml in the current folder" in flat and "--config FILE" in flat
    assert "override" in flat and "only as safe as the model" in flat
    code, out, _ = cli(capsys, "config", "check", "--help")
    assert code == 0 and "only as safe as the model" in out and "exit codes" in out


# -- run with a configuration ----------------------------------------------------------------------


def test_run_takes_its_settings_from_the_file(capsys, tmp_path):
    path = write_config(tmp_path, '\n[feedback]\nlevel = "all-problems"\n\n'
                                  '[trace]\npath = "run.jsonl"\n', kind="local")
    code, out, err = cli(capsys, "run", "--config", str(path))
    assert code in (0, 1), out + err
    assert f"configuration: {path}" in out
    assert "guesser heuristic" in out and "budget rounds 4" in out
    assert "feedback all-problems" in out
    assert "critics: plan-simulator, resource-counter, deadline-checker" in out  # from limits
    started = read_trace(tmp_path / "run.jsonl")[0]
    settings = started.guesser.settings
    assert settings["seed"] == 3 and settings["mistakes"]["drop"] == 0.08
    assert started.seed == 3 and started.feedback_level == "all-problems"
    assert [b.limit for b in started.budget] == ["rounds"]


def test_command_line_flags_override_the_file(capsys, tmp_path):
    path = write_config(tmp_path, kind="local")
    code, out, _ = cli(capsys, "run", "--config", str(path), "--rounds", "1",
                       "--mistakes", "0.3", "--uptake", "0", "--seed", "1",
                       "--feedback", "pass-fail", "--critics", "plan-simulator")
    assert code == 1
    assert "budget rounds 1" in out and "feedback pass-fail" in out
    assert "critics: plan-simulator\n" in out
    assert "NOT VERIFIED: the rounds budget of 1 was used up" in out


def test_plansieve_toml_in_the_current_folder_is_used(capsys, tmp_path, monkeypatch):
    write_config(tmp_path, kind="local")
    monkeypatch.chdir(tmp_path)
    code, out, err = cli(capsys, "run", "--quiet")
    assert code in (0, 1) and "configuration:" not in out, out + err
    code, out, _ = cli(capsys, "run")
    assert "configuration: plansieve.toml" in out and "budget rounds 4" in out


def test_run_needs_a_task_from_somewhere(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, _, err = cli(capsys, "run")
    assert code == 2 and "give --domain and --problem" in err


def test_http_run_over_the_config_reaches_a_verified_plan(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    path = write_config(tmp_path, '\n[budget.prices]\ninput_per_1k = 0.002\n'
                                  'output_per_1k = 0.004\n\n[trace]\npath = "run.jsonl"\n'
                                  'redact = ["east-stack"]\n')
    seen: list[httpx.Request] = []
    answers = iter([chat_answer("(lift carrier-7 reefer-12 north-berth)"),
                    chat_answer("Here is the plan:\n" + GOOD_PLAN)])

    def reply(request: httpx.Request) -> httpx.Response:
        seen.append(request)
        return next(answers)

    with respx.mock(assert_all_called=True) as router:
        router.post(URL).mock(side_effect=reply)
        code, out, err = cli(capsys, "run", "--config", str(path), "--plan-out",
                             str(tmp_path / "plan.txt"))
    assert code == 0, out + err
    assert "guesser http (POST " + URL + ")" in out
    assert "round 1: rejected" in out and "VERIFIED in round 2" in out
    assert len(seen) == 2 and seen[0].headers["authorization"] == f"Bearer {KEY}"
    # prices from the file: per round 1000 tokens in at 0.002/1k and 500 out at 0.004/1k
    # = 0.004, two rounds = 0.008 (arithmetic)
    assert "cost 0.008" in out
    trace = tmp_path / "run.jsonl"  # relative to the configuration's folder
    assert verify_trace(trace).intact
    raw = trace.read_text()
    assert KEY not in raw + out + err
    # the trace's redaction patterns came from the file
    assert "east-stack" not in raw and "[redacted]" in raw
    events = read_trace(trace)
    assert events[-1].kind == "run-finished" and events[-1].verified


def test_guesser_http_on_the_command_line_picks_the_table(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    path = write_config(tmp_path, kind="local")
    with respx.mock:
        route = respx.post(URL).mock(return_value=chat_answer(GOOD_PLAN))
        code, out, err = cli(capsys, "run", "--config", str(path), "--guesser", "http")
        assert route.call_count == 1
    assert code == 0, out + err
    assert "guesser http" in out


def test_prompt_templates_resolve_against_the_config_folder(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    folder = tmp_path / "conf"
    (folder / "prompts").mkdir(parents=True)
    (folder / "prompts" / "system.txt").write_text(
        "You plan the night shift at Veyrun harbour. Answer with the plan only.\n")
    path = write_config(folder, '\n[guesser.http.prompts]\nsystem = "prompts/system.txt"\n')
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    with respx.mock:
        route = respx.post(URL).mock(return_value=chat_answer(GOOD_PLAN))
        code, out, err = cli(capsys, "run", "--config", str(path))
        body = json.loads(route.calls[0].request.content)
    assert code == 0, out + err
    assert body["messages"][0]["content"].startswith("You plan the night shift at Veyrun")


def test_retried_tries_are_shown_as_they_happen(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    path = write_config(tmp_path)  # retries: attempts 2, first_wait 0.01
    with respx.mock:
        # Source: RFC 9110 sec. 15.6.4 — 503 is transient; sec. 10.2.3 Retry-After seconds.
        respx.post(URL).mock(side_effect=[
            httpx.Response(503, headers={"Retry-After": "0"}), chat_answer(GOOD_PLAN)])
        code, out, err = cli(capsys, "run", "--config", str(path))
    assert code == 0, out + err
    lines = out.splitlines()
    retry = next(i for i, l in enumerate(lines) if l.startswith("round 1, try 1 failed:"))
    assert "503 (Service Unavailable)" in lines[retry]
    assert lines[retry + 1].startswith("round 1: accepted")
    assert "VERIFIED in round 1 (2 guesser call(s)" in out


def test_a_failing_endpoint_exits_3_with_the_reason(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    path = write_config(tmp_path)
    with respx.mock:
        respx.post(URL).mock(return_value=httpx.Response(401, json={"error": "bad key"}))
        code, out, err = cli(capsys, "run", "--config", str(path))
    # Source: RFC 9110 sec. 15.5.2 — 401 is not a transient status: no retry, a final failure.
    assert code == 3
    assert "NOT VERIFIED" in out and "401" in out
    assert KEY not in out + err


@pytest.mark.parametrize("extra_args,words", [
    (["--mistakes", "0.1"], "--mistakes only applies to the local guesser"),
    (["--seed", "2", "--uptake", "1"], "--seed, --uptake only apply to the local guesser"),
])
def test_local_only_flags_are_refused_with_http(capsys, tmp_path, monkeypatch, extra_args,
                                                words):
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    code, _, err = cli(capsys, "run", "--config", str(write_config(tmp_path)), *extra_args)
    assert code == 2 and words in err


def test_guesser_http_needs_its_table(capsys, tmp_path):
    code, _, err = cli(capsys, "run", "--domain", str(HARBOUR / "domain.pddl"),
                       "--problem", str(HARBOUR / "problem.pddl"), "--guesser", "http")
    assert code == 2 and "needs a [guesser.http] table" in err


def test_a_missing_variable_stops_the_run_before_any_request(capsys, tmp_path, monkeypatch):
    monkeypatch.delenv("PLANNER_API_KEY", raising=False)
    path = write_config(tmp_path, '\n[trace]\npath = "run.jsonl"\n')
    with respx.mock:
        route = respx.post(URL).mock(return_value=chat_answer(GOOD_PLAN))
        code, _, err = cli(capsys, "run", "--config", str(path))
        assert not route.called
    assert code == 2 and "PLANNER_API_KEY is not set" in err
    assert not (tmp_path / "run.jsonl").exists()  # nothing half-written
