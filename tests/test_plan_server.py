"""The test plan server (tests/support/plan_server.py) checked on its own, with plain httpx.

The end-to-end tests trust this server to behave like a model server and to
misbehave exactly as scheduled; these checks hold it to that over real sockets.

Sources, named beside each check:
- HTTP/1.1 persistent connections and message framing: RFC 9112 §9.3 (connections
  are kept open unless one side says ``close``), §6.3 (a body shorter than its
  ``Content-Length`` is incomplete), §7.1 (chunked transfer coding).
- ``Retry-After``: RFC 9110 §10.2.3 (delay-seconds or an HTTP-date), HTTP-date
  format IMF-fixdate: RFC 9110 §5.6.7; 401: RFC 9110 §15.5.2.
- The plans: judged by the ``unified_planning`` oracle (test-only,
  tests/oracle/reference.py), not by our own critics.
- The harbour task is our own invented demo scenario (examples/harbour).
"""

from __future__ import annotations

import json
import socket
import time
from datetime import datetime, timedelta, timezone
from email.utils import parsedate_to_datetime
from pathlib import Path

import httpx
import pytest

from oracle import load_reference
from plansieve.adapters.extract import extract_plan
from plansieve.critics.pddl import load_task
from support import plan_server as ps
from support.plan_server import PlanServer

ROOT = Path(__file__).resolve().parent.parent
DOMAIN = ROOT / "examples" / "harbour" / "domain.pddl"
PROBLEM = ROOT / "examples" / "harbour" / "problem.pddl"
KEY = "test-key-9f3b2c71d0"


@pytest.fixture(scope="module")
def task():
    return load_task(str(DOMAIN), str(PROBLEM))


def chat(*user_turns: str) -> dict:
    messages = [{"role": "system", "content": "You plan harbour shifts."}]
    for i, turn in enumerate(user_turns):
        if i:
            messages.append({"role": "assistant", "content": "(an earlier answer)"})
        messages.append({"role": "user", "content": turn})
    return {"model": "local", "messages": messages}


def content_of(response: httpx.Response) -> str:
    return response.json()["choices"][0]["message"]["content"]


def steps(text: str):
    return [(s.action, s.args) for s in extract_plan(text).plan.steps]


def test_answers_right_plan_after_wrong_rounds_and_keeps_the_connection(task):
    with PlanServer(task, wrong_rounds=1) as server, httpx.Client() as client:
        first = client.post(server.url, json=chat("plan it"))
        second = client.post(server.url, json=chat("plan it", "step 1 fails"))
        third = client.post(server.url, json={"round": 1, "messages": chat("a", "b")["messages"]})
        assert first.status_code == second.status_code == 200
        assert content_of(first) == server.wrong_text
        assert content_of(second) == server.plan_text
        assert content_of(third) == server.wrong_text  # an explicit round wins over the turns
        usage = second.json()["usage"]
        assert usage["completion_tokens"] == len(server.plan_text.split())
        assert usage["prompt_tokens"] > 0
        # Source: RFC 9112 §9.3 — HTTP/1.1 keeps the connection open by default.
        assert server.connections == 1
        assert server.requests == 3
    # Source: the unified_planning oracle — the right plan is valid, the spoiled one is not.
    oracle = load_reference(DOMAIN, PROBLEM)
    assert oracle.validate(steps(server.plan_text)).valid
    assert not oracle.validate(steps(server.wrong_text)).valid
    assert steps(server.wrong_text) == steps(server.plan_text)[1:]


def test_prompt_text_shape(task):
    with PlanServer(task, shape="prompt-text", wrong_rounds=1) as server:
        got = httpx.post(server.url, json={"prompt": "plan the shift", "round": 2})
        assert got.status_code == 200
        assert got.json() == {"text": server.plan_text}


def test_key_is_checked(task):
    with PlanServer(task, api_key=KEY) as server, httpx.Client() as client:
        # Source: RFC 9110 §15.5.2 — 401 when the request lacks valid credentials.
        assert client.post(server.url, json=chat("x")).status_code == 401
        wrong = client.post(server.url, json=chat("x"), headers={"Authorization": "Bearer nope"})
        assert wrong.status_code == 401
        assert KEY not in wrong.text
        good = client.post(server.url, json=chat("x"), headers={"Authorization": f"Bearer {KEY}"})
        assert good.status_code == 200
        assert [s.status for s in server.served] == [401, 401, 200]


def test_counts_connections_and_records_handling_time(task):
    with PlanServer(task, latency=0.05) as server:
        clients = [httpx.Client() for _ in range(3)]
        try:
            for _ in range(2):
                for c in clients:
                    got = c.post(server.url, json=chat("go"))
                    assert got.status_code == 200
        finally:
            for c in clients:
                c.close()
        # The server writes its own time after the answer is on its way, so the client can
        # have it first: give the records a moment to be completed.
        for _ in range(500):
            served = server.served
            if all(s.seconds is not None for s in served):
                break
            time.sleep(0.01)
        assert server.connections == 3 and server.requests == 6
        assert sorted({s.connection for s in served}) == [0, 1, 2]
        assert [s.number for s in served] == list(range(6))
        # the added latency is part of the server's own time (sleep waits at least that
        # long, less the event loop's clock resolution)
        assert all(s.seconds >= 0.045 for s in served)


def test_status_faults_with_retry_after_in_both_forms(task):
    moment = datetime(2031, 5, 4, 3, 2, 1, tzinfo=timezone.utc)
    faults = [ps.status(503, retry_after=7), ps.status(429, retry_after=moment),
              ps.status(429, retry_after=timedelta(seconds=30)), ps.status(500)]
    with PlanServer(task, faults=faults) as server, httpx.Client() as client:
        got = [client.post(server.url, json=chat("go")) for _ in range(5)]
    assert [g.status_code for g in got] == [503, 429, 429, 500, 200]
    # Source: RFC 9110 §10.2.3 (delay-seconds) and §5.6.7 (IMF-fixdate).
    assert got[0].headers["retry-after"] == "7"
    assert got[1].headers["retry-after"] == "Sun, 04 May 2031 03:02:01 GMT"
    later = parsedate_to_datetime(got[2].headers["retry-after"])
    assert timedelta(seconds=25) < later - datetime.now(timezone.utc) <= timedelta(seconds=31)
    assert "retry-after" not in got[3].headers
    assert [s.fault for s in server.served] == ["status"] * 4 + [None]


def test_function_schedule_and_set_faults(task):
    with PlanServer(task, faults=lambda n: ps.status(503) if n % 2 == 0 else None) as server:
        codes = [httpx.post(server.url, json=chat("go")).status_code for _ in range(4)]
        assert codes == [503, 200, 503, 200]
        server.set_faults([ps.no_plan()])
        after = httpx.post(server.url, json=chat("go"))
        assert content_of(after) == ps.NO_PLAN_TEXT and steps(content_of(after)) == []
        assert httpx.post(server.url, json=chat("go")).status_code == 200


def test_reset_truncated_and_stall(task):
    faults = [ps.reset(), ps.truncated(), ps.stall(1.0)]
    with PlanServer(task, faults=faults) as server:
        with httpx.Client() as client:
            with pytest.raises((httpx.ReadError, httpx.RemoteProtocolError)):
                client.post(server.url, json=chat("go"))
            # Source: RFC 9112 §6.3 — fewer bytes than Content-Length is an incomplete message.
            with pytest.raises(httpx.RemoteProtocolError):
                client.post(server.url, json=chat("go"))
            with pytest.raises(httpx.ReadTimeout):
                client.post(server.url, json=chat("go"), timeout=httpx.Timeout(5, read=0.2))
            assert content_of(client.post(server.url, json=chat("go"))) == server.plan_text
        # every broken answer closed its connection; the healthy one used a fresh one
        assert server.connections == 4
        # the stalled request is on record (in arrival order) before its answer is sent
        assert [s.fault for s in server.served] == ["reset", "truncated", "stall", None]
        assert server.served[2].seconds is None


def test_reset_sends_tcp_reset(task):
    with PlanServer(task, faults=[ps.reset()]) as server:
        body = json.dumps(chat("go")).encode()
        with socket.create_connection(("127.0.0.1", server.port), timeout=5) as s:
            s.sendall(b"POST /answer HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
                      + f"Content-Length: {len(body)}\r\n\r\n".encode() + body)
            # Source: RFC 9293 §3.5.2 — a reset makes the receiver's next read fail.
            with pytest.raises(ConnectionResetError):
                while s.recv(4096):
                    pass


def test_unreadable_bodies(task):
    faults = [ps.not_json(), ps.html_page(), ps.html_page(502)]
    with PlanServer(task, faults=faults) as server, httpx.Client() as client:
        bad = client.post(server.url, json=chat("go"))
        assert bad.status_code == 200 and bad.headers["content-type"] == "application/json"
        with pytest.raises(ValueError):
            bad.json()
        page = client.post(server.url, json=chat("go"))
        assert page.headers["content-type"].startswith("text/html")
        assert page.text.lstrip().lower().startswith("<!doctype html>")
        assert client.post(server.url, json=chat("go")).status_code == 502


def test_oversize_with_and_without_content_length(task):
    with PlanServer(task, faults=[ps.oversize(200_000), ps.oversize(200_000, chunked=True)]) \
            as server, httpx.Client() as client:
        sized = client.post(server.url, json=chat("go"))
        assert int(sized.headers["content-length"]) >= 200_000
        assert server.plan_text in content_of(sized)
        with client.stream("POST", server.url, json=chat("go")) as streamed:
            # Source: RFC 9112 §7.1 — chunked coding, no Content-Length.
            assert "content-length" not in streamed.headers
            assert streamed.headers["transfer-encoding"] == "chunked"
            size = sum(len(part) for part in streamed.iter_bytes())
        assert size >= 200_000
        assert server.connections == 1


def test_not_json_request_and_unknown_path(task):
    with PlanServer(task) as server, httpx.Client() as client:
        assert client.post(server.url, content=b"plan please").status_code == 400
        assert client.post(server.base + "/elsewhere", json={}).status_code == 404
        stats = client.get(server.base + ps.STATS_PATH).json()
        assert stats["requests"] == 2 and stats["connections"] == 1
        assert [s["status"] for s in stats["served"]] == [400, 404]


def test_echo_fault_quotes_the_key_back(task):
    # The secret-hygiene tests rely on this: the server really does send the key back.
    with PlanServer(task, api_key=KEY, faults=[ps.echo_headers(400)]) as server:
        got = httpx.post(server.url + "?token=abc", json=chat("go"),
                         headers={"Authorization": f"Bearer {KEY}"})
        assert got.status_code == 400
        assert got.json()["headers"]["authorization"] == f"Bearer {KEY}"
        assert got.json()["error"].startswith(f"credentials 'Bearer {KEY}' not accepted for /answer?token=abc")
