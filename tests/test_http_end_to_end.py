"""The HTTP guesser end to end: the whole loop over real sockets against a plan server.

The server (tests/support/plan_server.py) listens on 127.0.0.1 on an ephemeral port,
answers with plans from the local heuristic guesser (deliberately wrong ones in the
first rounds) and misbehaves on a schedule. Nothing here mocks the transport: every
byte goes through httpx, the kernel and h11.

Sources, named beside each check:
- Which failures deserve another try: RFC 9110 §15 (408, 500, 502, 503, 504 are
  transient server conditions), RFC 6585 §4 (429); ``Retry-After`` as delay-seconds
  or HTTP-date: RFC 9110 §10.2.3. Other 4xx are the client's fault and are not
  retried (RFC 9110 §15.5).
- Message framing: a body cut short of its ``Content-Length`` is incomplete
  (RFC 9112 §6.3).
- The verified plan is also judged by the ``unified_planning`` oracle (test-only).
- The harbour task is our own invented demo scenario (examples/harbour).
"""

from __future__ import annotations

import asyncio
import json
import logging
import socket
import time
import traceback
from datetime import timedelta
from pathlib import Path

import pytest

from oracle import load_reference
from plansieve.adapters.extract import extract_plan
from plansieve.adapters.guesser import GuesserFailed, GuessRequest
from plansieve.adapters.http_guesser import HttpGuesser
from plansieve.adapters.http_settings import HttpSettings
from plansieve.critics.pddl import load_task
from plansieve.loop.budget import budget_of
from plansieve.loop.engine import sieve
from plansieve.loop.trace import FileSink, TraceWriter
from plansieve.loop.trace_read import read_trace, verify_trace
from support import plan_server as ps
from support.plan_server import PlanServer

ROOT = Path(__file__).resolve().parent.parent
DOMAIN = ROOT / "examples" / "harbour" / "domain.pddl"
PROBLEM = ROOT / "examples" / "harbour" / "problem.pddl"

KEY_VAR = "PLANSIEVE_E2E_KEY"
KEY = "sk-e2e-7Hq2mZ0vXw41LpRt"
TOKEN_VAR = "PLANSIEVE_E2E_URL_TOKEN"
URL_TOKEN = "urltok-55d0c3a9e1b7"
LITERAL = "team-literal-8c1f4a2e"


@pytest.fixture(scope="module")
def task():
    return load_task(str(DOMAIN), str(PROBLEM))


@pytest.fixture
def key_env(monkeypatch):
    monkeypatch.setenv(KEY_VAR, KEY)
    monkeypatch.setenv(TOKEN_VAR, URL_TOKEN)


def http_settings(url: str, **override) -> HttpSettings:
    """Fast settings for tests: short read timeout, tiny waits, enough tries."""
    data = {
        "url": url,
        "headers": {"Authorization": "Bearer ${" + KEY_VAR + "}"},
        "model": "harbour-planner",
        "timeouts": {"connect": 2, "read": 0.5, "call": 10},
        "retries": {"attempts": 6, "first_wait": 0.01, "longest_wait": 3, "jitter": 0.1},
    }
    data.update(override)
    return HttpSettings.model_validate(data)


def run_loop(task, guesser: HttpGuesser, trace_path: Path, budget=None):
    """One loop with a file trace; the guesser's pool is closed before the event loop ends.

    The default budget is roomy on purpose (see the rounds-budget test below)."""
    async def go():
        with TraceWriter(FileSink(trace_path), run_id=trace_path.stem) as trace:
            try:
                return await sieve(task, guesser, trace=trace, task_id="veyrun-tuesday",
                                   budget=budget or budget_of(rounds=20))
            finally:
                await guesser.aclose()
    return asyncio.run(go())


def events(path: Path, kind: str | None = None) -> list[dict]:
    got = [e.model_dump(mode="json") for e in read_trace(path)]
    return [e for e in got if kind is None or e["kind"] == kind]


# --- a verified plan through faults ------------------------------------------------------


def test_loop_reaches_a_verified_plan_through_faults(task, key_env, tmp_path):
    faults = [
        # round 1: busy with a 0 s Retry-After, a reset, then the (spoiled) plan
        ps.status(503, retry_after=0), ps.reset(), None,
        # round 2: 429 with an HTTP-date, a stall past the read timeout, a cut body, a 500
        ps.status(429, retry_after=timedelta(seconds=1)), ps.stall(1.5), ps.truncated(),
        ps.status(500), None,
        # round 3: an answer with no plan in it (feedback, not a failure)
        ps.no_plan(),
        # round 4: a 502, then the right plan
        ps.status(502), None,
    ]
    trace_path = tmp_path / "through-faults.jsonl"
    with PlanServer(task, api_key=KEY, wrong_rounds=2, faults=faults) as server:
        outcome = run_loop(task, HttpGuesser(http_settings(server.url)), trace_path)
        served = server.served

    assert outcome.verified, outcome.detail
    assert outcome.rounds == 4
    assert [s.round for s in served] == [1, 1, 1, 2, 2, 2, 2, 2, 3, 4, 4]
    assert [s.fault for s in served] == ["status", "reset", None, "status", "stall",
                                         "truncated", "status", None, "no-plan", "status", None]

    # Every try the server saw is in the trace: a retried failure or a received answer.
    failed = events(trace_path, "guess-failed")
    received = events(trace_path, "guess-received")
    assert [(e["round"], e["attempt"]) for e in failed] == [
        (1, 1), (1, 2), (2, 1), (2, 2), (2, 3), (2, 4), (4, 1)]
    assert all(e["retry"] for e in failed)
    assert [(e["round"], e["attempt"]) for e in received] == [(1, 3), (2, 5), (3, 1), (4, 2)]
    assert len(failed) + len(received) == len(served) == 11
    # Retries are calls, not rounds (the loop's own rule).
    finished = events(trace_path, "run-finished")[-1]
    assert finished["totals"]["guesser_calls"] == 11 and finished["rounds"] == 4

    # Each failed try says what happened, and the waits are those asked for.
    # Source: RFC 9110 §10.2.3 — Retry-After: 0 means no wait; the HTTP-date one second
    # ahead (cut to whole seconds) means at most one second.
    reasons = [e["reason"] for e in failed]
    assert "503" in reasons[0] and "429" in reasons[2] and "500" in reasons[5]
    assert "502" in reasons[6]
    assert len(set(reasons)) == len(reasons)
    waits = [e["wait_seconds"] for e in failed]
    assert waits[0] == 0
    assert 0 <= waits[2] <= 1.05
    assert all(0 < w <= 3 for w in (waits[1], waits[3], waits[4], waits[5], waits[6]))

    # The spoiled plans were rejected by a sound critic, the prose got feedback.
    verdicts = events(trace_path, "verdict")
    assert {v["round"] for v in verdicts if not v["verdict"]["passed"]} == {1, 2}
    plans = {e["round"]: e["steps"] for e in events(trace_path, "plan-read")}
    assert plans[3] == []
    assert {e["round"] for e in events(trace_path, "feedback")} == {1, 2, 3}

    # The trace is whole, and the accepted plan is the server's right plan.
    assert verify_trace(trace_path).intact
    assert outcome.plan_text == server.plan_text
    # Source: the unified_planning oracle judges the accepted plan valid.
    steps = [(s.action, s.args) for s in extract_plan(outcome.plan_text).plan.steps]
    assert load_reference(DOMAIN, PROBLEM).validate(steps).valid


def test_retries_do_not_use_up_the_rounds_budget(task, key_env, tmp_path):
    """The issue: "retries never count as rounds, but their time and any usage count
    against the budget". Two rounds are needed, and a budget of two rounds must do,
    however many tries fail on the way."""
    busy = ps.status(503, retry_after=0)
    faults = [busy, busy, busy, None, busy, busy, busy, None]
    with PlanServer(task, api_key=KEY, wrong_rounds=1, faults=faults) as server:
        outcome = run_loop(task, HttpGuesser(http_settings(server.url)),
                           tmp_path / "rounds.jsonl", budget=budget_of(rounds=2))
        tries = server.requests
    assert outcome.stop == "verified", outcome.detail
    assert outcome.rounds == 2 and outcome.totals.guesser_calls == tries == 8


def test_prompt_text_shape_with_fresh_prompts(task, tmp_path):
    settings = HttpSettings.model_validate({
        "url": "http://127.0.0.1:1/unused", "preset": "prompt-text", "conversation": "fresh",
        # the round goes into the body so the server can tell the rounds apart
        "body": {"prompt": "{{prompt}}", "round": "{{round}}"},
        "timeouts": {"read": 2}, "retries": {"first_wait": 0.01}})
    with PlanServer(task, shape="prompt-text", wrong_rounds=1) as server:
        guesser = HttpGuesser(settings.model_copy(update={"url": server.url}))
        outcome = run_loop(task, guesser, tmp_path / "prompt-text.jsonl")
        assert [s.round for s in server.served] == [1, 2]
    assert outcome.verified and outcome.rounds == 2
    assert outcome.plan_text == server.plan_text


# --- failures that end the round at once ----------------------------------------------------


FINAL = {
    "html page": (ps.html_page(), "html"),
    "not json": (ps.not_json(), "json"),
    "oversize with length": (ps.oversize(50_000), "bytes"),
    "oversize streamed": (ps.oversize(50_000, chunked=True), "bytes"),
    "bad request": (ps.status(400), "400"),
    "not found": (ps.status(404), "404"),
}


@pytest.mark.parametrize("name", list(FINAL))
def test_failures_that_are_not_retried(task, key_env, tmp_path, name):
    fault, word = FINAL[name]
    trace_path = tmp_path / "final.jsonl"
    with PlanServer(task, api_key=KEY, faults=[fault]) as server:
        guesser = HttpGuesser(http_settings(server.url, limits={"max_answer_bytes": 8192}))
        outcome = run_loop(task, guesser, trace_path)
        assert server.requests == 1  # Source: RFC 9110 §15.5 — no second try
    assert outcome.stop == "guesser-failed" and outcome.rounds == 0
    assert word in outcome.detail.lower()
    failed = events(trace_path, "guess-failed")
    assert [(e["attempt"], e["retry"]) for e in failed] == [(1, False)]
    assert verify_trace(trace_path).intact


def test_wrong_key_is_refused_without_retry(task, monkeypatch, tmp_path):
    monkeypatch.setenv(KEY_VAR, "not-the-right-key-000")
    with PlanServer(task, api_key=KEY) as server:
        outcome = run_loop(task, HttpGuesser(http_settings(server.url)), tmp_path / "k.jsonl")
        assert [s.status for s in server.served] == [401]
    assert outcome.stop == "guesser-failed" and "401" in outcome.detail


def test_tries_run_out(task, key_env, tmp_path):
    trace_path = tmp_path / "busy.jsonl"
    with PlanServer(task, api_key=KEY, faults=lambda n: ps.status(503)) as server:
        guesser = HttpGuesser(http_settings(server.url, retries={
            "attempts": 3, "first_wait": 0.01, "longest_wait": 1}))
        outcome = run_loop(task, guesser, trace_path)
        assert server.requests == 3
    assert outcome.stop == "guesser-failed" and "503" in outcome.detail
    failed = events(trace_path, "guess-failed")
    assert [(e["attempt"], e["retry"]) for e in failed] == [(1, True), (2, True), (3, False)]


# --- secret hygiene -------------------------------------------------------------------------


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_the_key_appears_nowhere(task, key_env, tmp_path, caplog, capsys):
    """Run with a known key (from the environment), a token in the URL (likewise) and a
    literal token header through every kind of outcome; then scan everything."""
    caplog.set_level(logging.DEBUG)  # the root logger: every logger's records reach it
    for name in list(logging.root.manager.loggerDict):
        caplog.set_level(logging.DEBUG, logger=name)
    secrets = (KEY, URL_TOKEN, LITERAL)
    texts: list[str] = []
    headers = {"Authorization": "Bearer ${" + KEY_VAR + "}", "X-Team-Token": LITERAL}

    def guesser_for(url: str, **override) -> HttpGuesser:
        return HttpGuesser(http_settings(url + "?access_token=${" + TOKEN_VAR + "}",
                                         headers=headers, **override))

    schedules = {
        # verified through transient faults, one of which quotes the headers back
        "verified": [ps.echo_headers(503), ps.reset(), ps.stall(1.0), ps.truncated()],
        # the headers quoted back in a refusal that ends the run
        "refused": [ps.echo_headers(400)],
        "unreadable": [ps.html_page(502), ps.not_json()],
    }
    accepted = 0
    details: dict[str, str] = {}
    stops: dict[str, str] = {}
    for name, faults in schedules.items():
        with PlanServer(task, api_key=KEY, wrong_rounds=1, faults=faults) as server:
            guesser = guesser_for(server.url)
            texts.append(json.dumps(guesser.describe()))
            outcome = run_loop(task, guesser, tmp_path / f"{name}.jsonl")
            texts += [outcome.model_dump_json(), outcome.detail]
            details[name] = outcome.detail
            stops[name] = outcome.stop
            accepted += sum(s.status == 200 for s in server.served)
    assert stops == {"verified": "verified", "refused": "guesser-failed",
                     "unreadable": "guesser-failed"}

    # Errors raised straight from the guesser, outside the loop, with their tracebacks:
    # a refusal quoting the key, and a port where nothing listens.
    with PlanServer(task, api_key=KEY, faults=[ps.echo_headers(401)]) as server:
        failures = [_guess_error(guesser_for(server.url), task)]
    failures.append(_guess_error(guesser_for(f"http://127.0.0.1:{_free_port()}/answer",
                                             retries={"attempts": 2, "first_wait": 0.01}), task))
    for error in failures:
        assert isinstance(error, GuesserFailed)
        texts += [str(error), repr(error), error.reason,
                  "".join(traceback.format_exception(error))]

    texts += [p.read_text() for p in tmp_path.glob("*.jsonl")]
    texts += [caplog.text] + [r.getMessage() for r in caplog.records]
    out, err = capsys.readouterr()
    texts += [out, err]

    # The scan could fail: the key was sent and accepted, the refusal did carry it back
    # (test_plan_server.py checks the echo), and the debug logs were captured.
    assert accepted >= 3
    assert any(r.name == "plansieve.http" and r.levelno == logging.DEBUG for r in caplog.records)
    assert any(r.name.startswith("httpcore") for r in caplog.records)
    assert any(r.name == "httpx" for r in caplog.records)  # httpx logs each request's URL
    assert len(list(tmp_path.glob("*.jsonl"))) == 3
    for secret in secrets:
        leaks = [t for t in texts if secret in t]
        assert not leaks, f"a secret leaked into: {leaks[0][:300]!r}"
    # the refusal quoted the key and the URL token back, and what reached us was starred
    # out (the mask is the one the secrets module writes)
    assert details["refused"].count("***") >= 2


def _guess_error(guesser: HttpGuesser, task) -> BaseException:
    async def go():
        try:
            await guesser.guess(GuessRequest(task=task, round=1, task_id="veyrun-tuesday"))
        except BaseException as e:  # noqa: BLE001 — the error is what the test scans
            return e
        finally:
            await guesser.aclose()
        raise AssertionError("the guess was expected to fail")
    return asyncio.run(go())


# --- the budget under faults ---------------------------------------------------------------


@pytest.mark.parametrize("retry_after", [30, timedelta(seconds=30)], ids=["seconds", "http-date"])
def test_budget_holds_when_the_server_asks_to_wait_longer(task, key_env, tmp_path, retry_after):
    """A 10 s budget and a server that always answers 503 with Retry-After 30 s: the loop
    stops within the budget instead of waiting 30 s (a behaviour bound, not a speed
    target: the 30 s wait it must not start is three times the bound)."""
    trace_path = tmp_path / "patience.jsonl"
    with PlanServer(task, api_key=KEY,
                    faults=lambda n: ps.status(503, retry_after=retry_after)) as server:
        guesser = HttpGuesser(http_settings(server.url, retries={"first_wait": 0.01}))
        started = time.monotonic()
        outcome = run_loop(task, guesser, trace_path, budget=budget_of(rounds=5, seconds=10))
        elapsed = time.monotonic() - started
        tries = server.requests
    assert elapsed < 10
    assert outcome.totals.seconds < 10
    assert outcome.stop == "guesser-failed"
    assert "budget" in outcome.detail and "503" in outcome.detail
    # it gave up at once rather than wait (Retry-After 30 s > the 10 s left)
    assert tries == 1
    finished = events(trace_path, "run-finished")[-1]
    assert finished["stop"] == "guesser-failed" and not finished["verified"]


def test_budget_cuts_a_stalled_answer(task, key_env, tmp_path):
    """A server that says nothing for longer than the whole budget (and than no read
    timeout would catch): the loop's own time limit ends the run."""
    trace_path = tmp_path / "stalled.jsonl"
    with PlanServer(task, api_key=KEY, faults=lambda n: ps.stall(30)) as server:
        guesser = HttpGuesser(http_settings(server.url, timeouts={"read": 60, "call": 120}))
        started = time.monotonic()
        outcome = run_loop(task, guesser, trace_path, budget=budget_of(rounds=5, seconds=1))
        elapsed = time.monotonic() - started
    assert outcome.stop == "seconds"
    assert elapsed < 10
    assert events(trace_path, "run-finished")[-1]["stop"] == "seconds"


def test_the_local_model_example_runs_from_the_command_line(task, tmp_path, monkeypatch, capsys):
    """examples/local-model/plansieve.toml, pointed at the test server instead of a model
    on port 8080: the CLI reaches a verified plan over real sockets, through a 503."""
    from plansieve.cli import main
    from plansieve.critics.limits import attach_limits, load_limits

    example = ROOT / "examples" / "local-model" / "plansieve.toml"
    harbour = (ROOT / "examples" / "harbour").as_posix()
    monkeypatch.setenv("PLANNER_API_KEY", KEY)
    # the example checks the shift's limits file, so the server plans within it
    limited = attach_limits(task, load_limits(ROOT / "examples" / "harbour" / "limits.toml"))
    with PlanServer(limited, api_key=KEY, wrong_rounds=1,
                    faults=[ps.status(503, retry_after=0)]) as server:
        text = (example.read_text()
                .replace('"../harbour/', f'"{harbour}/')
                .replace("http://127.0.0.1:8080/v1/chat/completions", server.url)
                .replace('path = "veyrun-run.jsonl"', 'path = "run.jsonl"')
                .replace("first_wait = 1\n", "first_wait = 0.01\n"))
        assert server.url in text and "../harbour" not in text
        config = tmp_path / "plansieve.toml"
        config.write_text(text)
        code = main(["run", "--config", str(config)])
        out, err = capsys.readouterr()
        served = server.served
    assert code == 0, out + err
    assert "round 1, try 1 failed: the endpoint answered 503" in out
    assert "VERIFIED in round 2" in out
    assert [s.round for s in served] == [1, 1, 2]
    events = read_trace(tmp_path / "run.jsonl")
    assert verify_trace(tmp_path / "run.jsonl").intact
    assert [(e.kind, e.attempt) for e in events if e.kind.startswith("guess-")
            and e.kind != "guess-asked"] == [("guess-failed", 1), ("guess-received", 2),
                                             ("guess-received", 1)]
    assert KEY not in (tmp_path / "run.jsonl").read_text() + out + err
