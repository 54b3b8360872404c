"""The HTTP guesser against mocked endpoints (respx): answer shapes, faults, retries, limits.

Every request goes through the real guesser, the real shared httpx client and the real
tenacity retry loop; only the transport below httpx is replaced by respx. The plans come
from the harbour demo (examples/harbour, our own scenario). Waits are kept tiny
(first_wait 0.01 s) and no test asserts a wall-clock time.
"""

from __future__ import annotations

import asyncio
import contextlib
import gc
import json
import logging
import time
import weakref
from datetime import datetime, timedelta, timezone
from email.utils import format_datetime
from pathlib import Path

import httpcore
import httpx
import pytest
import respx

from plansieve.adapters.guesser import Attempt, GuesserFailed, GuessRequest
from plansieve.adapters.http_errors import (
    AnswerTooLarge, AnswerUnreadable, EndpointBusy, EndpointRefused, EndpointTimedOut,
    EndpointUnreachable, NoTimeToWait,
)
from plansieve.adapters.http_guesser import HttpGuesser
from plansieve.adapters.http_pool import (
    SHARD_CONNECTIONS, close_shared_clients, endpoint_gate, lease, open_clients,
)
from plansieve.adapters.http_settings import HttpSettings
from plansieve.adapters.rate_limit import TokenBucket
from plansieve.adapters.retry_after import parse_http_date, retry_after_seconds
from plansieve.adapters.tokens import estimate_tokens
from plansieve.critics.errors import InputError
from plansieve.critics.pddl import load_task
from plansieve.loop.budget import at_most_rounds, at_most_seconds
from plansieve.loop.engine import sieve
from plansieve.loop.trace import MemorySink, TraceWriter

HARBOUR = Path(__file__).resolve().parents[1] / "examples" / "harbour"
TASK = load_task(HARBOUR / "domain.pddl", HARBOUR / "problem.pddl")
GOOD = (HARBOUR / "plan-good.plan").read_text()
NO_PLAN = "I am not able to work out a plan for this harbour."

URL = "http://planner.test/v1/chat"
KEY = "sk-plansieve-test-7f3a91c0"
ENV = {"PLANNER_KEY": KEY}


def make_settings(**over) -> HttpSettings:
    data = dict(url=URL, headers={"Authorization": "Bearer ${PLANNER_KEY}"},
                model="harbour-planner",
                retries=dict(attempts=4, first_wait=0.01, longest_wait=0.2, jitter=0.5),
                timeouts=dict(connect=0.5, read=0.5, call=2.0))
    data.update(over)
    return HttpSettings.model_validate(data)


def make_guesser(**over) -> HttpGuesser:
    return HttpGuesser(make_settings(**over), env=ENV)


def chat(text, *, prompt_tokens: int | None = None, completion_tokens: int | None = None,
         status: int = 200) -> httpx.Response:
    body: dict = {"id": "c-1", "choices": [{"index": 0, "message": {"role": "assistant",
                                                                    "content": text}}]}
    if prompt_tokens is not None:
        body["usage"] = {"prompt_tokens": prompt_tokens, "completion_tokens": completion_tokens}
    return httpx.Response(status, json=body)


def sent_json(call) -> dict:
    return json.loads(call.request.content)


async def _guess(guesser: HttpGuesser, *, round_: int = 1, history=(), deadline_in=None,
                 settings=None):
    notes = []
    request = GuessRequest(task=TASK, round=round_, history=tuple(history), task_id="harbour",
                           settings=settings or {},
                           deadline=None if deadline_in is None
                           else time.monotonic() + deadline_in,
                           on_retry=notes.append)
    try:
        return await guesser.guess(request), notes
    finally:
        await close_shared_clients()


def ask(guesser: HttpGuesser, **kw):
    """(the guess, the retry notes) of one round."""
    return asyncio.run(_guess(guesser, **kw))


def fail(guesser: HttpGuesser, error=GuesserFailed, **kw):
    """(the error raised, the retry notes reported before it)."""
    notes_seen = []

    async def main():
        notes = []
        request = GuessRequest(task=TASK, round=1, task_id="harbour",
                               deadline=None if kw.get("deadline_in") is None
                               else time.monotonic() + kw["deadline_in"],
                               on_retry=notes.append)
        try:
            await guesser.guess(request)
        finally:
            notes_seen.extend(notes)
            await close_shared_clients()

    with pytest.raises(error) as info:
        asyncio.run(main())
    return info.value, notes_seen


@pytest.fixture
def router():
    with respx.mock(assert_all_mocked=True, assert_all_called=False) as r:
        yield r


# --- Retry-After (RFC 9110) ---------------------------------------------------------------------

NOV_6_1994 = datetime(1994, 11, 6, 8, 49, 37, tzinfo=timezone.utc)


@pytest.mark.parametrize("text", [
    # Source: RFC 9110 sec. 5.6.7, the three example forms of the same instant:
    "Sun, 06 Nov 1994 08:49:37 GMT",   # IMF-fixdate
    "Sunday, 06-Nov-94 08:49:37 GMT",  # obsolete RFC 850 format
    "Sun Nov  6 08:49:37 1994",        # ANSI C's asctime() format
])
def test_http_date_forms_of_rfc_9110(text):
    now = datetime(2025, 1, 1, tzinfo=timezone.utc)
    assert parse_http_date(text, now) == NOV_6_1994
    # Source: RFC 9110 sec. 10.2.3: an HTTP-date names when to retry; seconds count from now.
    assert retry_after_seconds(text, NOV_6_1994 - timedelta(seconds=30)) == 30.0
    # A date already past asks for no wait.
    assert retry_after_seconds(text, now) == 0.0


def test_retry_after_examples_of_rfc_9110():
    # Source: RFC 9110 sec. 10.2.3, its two examples.
    now = datetime(1999, 12, 31, 23, 59, 0, tzinfo=timezone.utc)
    assert retry_after_seconds("Fri, 31 Dec 1999 23:59:59 GMT", now) == 59.0
    assert retry_after_seconds("120", now) == 120.0
    assert retry_after_seconds("0", now) == 0.0
    assert retry_after_seconds(" 7 ", now) == 7.0  # field values come with OWS trimmed anyway
    assert retry_after_seconds(None, now) is None


@pytest.mark.parametrize("text", [
    "-5", "1.5", "+3", "soon", "", "5 s",                 # delay-seconds is 1*DIGIT only
    "Sun, 06 Nov 1994 08:49:37 UTC",                      # the zone must be GMT
    "sun, 06 nov 1994 08:49:37 GMT",                      # HTTP-date is case-sensitive
    "Sun, 6 Nov 1994 08:49:37 GMT",                       # day is 2DIGIT in IMF-fixdate
    "Sun, 31 Feb 1994 08:49:37 GMT",                      # no such day
    "Sun, 06 Nov 1994 24:49:37 GMT",                      # no such hour
    "Sunday, 06-Nov-1994 08:49:37 GMT",                   # RFC 850 has a 2-digit year
    "1994-11-06T08:49:37Z",                               # ISO 8601 is not an HTTP-date
])
def test_unreadable_retry_after_is_ignored(text):
    # Source: RFC 9110 sec. 5.6.7 and 10.2.3 grammars (delay-seconds = 1*DIGIT).
    assert retry_after_seconds(text, NOV_6_1994) is None


def test_rfc_850_two_digit_years():
    # Source: RFC 9110 sec. 5.6.7: a two-digit year more than 50 years in the future is
    # the most recent past year with those digits.
    in_2025 = datetime(2025, 6, 1, tzinfo=timezone.utc)
    assert parse_http_date("Friday, 01-Feb-80 00:00:00 GMT", in_2025).year == 1980
    assert parse_http_date("Friday, 01-Feb-30 00:00:00 GMT", in_2025).year == 2030
    in_2080 = datetime(2080, 6, 1, tzinfo=timezone.utc)
    assert parse_http_date("Friday, 01-Feb-94 00:00:00 GMT", in_2080).year == 2094


def test_leap_second_is_read():
    # Source: RFC 9110 sec. 5.6.7: second may be 60 (leap second); read as :59 here.
    got = parse_http_date("Sat, 31 Dec 2016 23:59:60 GMT")
    assert got == datetime(2016, 12, 31, 23, 59, 59, tzinfo=timezone.utc)


# --- the token bucket ---------------------------------------------------------------------------

class FakeTime:
    """A clock that moves only when someone sleeps."""

    def __init__(self) -> None:
        self.now = 100.0
        self.slept: list[float] = []

    def clock(self) -> float:
        return self.now

    async def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)
        await asyncio.sleep(0)


# Token bucket semantics (tokens refill at a fixed rate up to the burst size, a request takes
# one) as in RFC 2697 sec. 3 (from memory); the numbers below follow from 60 a minute = 1/s.

def test_bucket_spaces_requests_in_arrival_order():
    t = FakeTime()
    bucket = TokenBucket(60, clock=t.clock, sleep=t.sleep)

    async def main():
        await asyncio.gather(*(bucket.take() for _ in range(4)))

    asyncio.run(main())
    # the first takes the saved token; the others queue 1 s apart
    assert t.slept == pytest.approx([1.0, 2.0, 3.0])


def test_bucket_refills_with_time_and_keeps_a_burst():
    t = FakeTime()
    bucket = TokenBucket(120, burst=3, clock=t.clock, sleep=t.sleep)  # 2 tokens a second

    async def main():
        for _ in range(3):
            await bucket.take()
        assert t.slept == []
        assert bucket.wait_for_next() == pytest.approx(0.5)
        t.now += 10  # long idle: refills to the burst of 3, no more
        for _ in range(3):
            await bucket.take()
        assert t.slept == []
        await bucket.take()
        assert t.slept == pytest.approx([0.5])

    asyncio.run(main())


def test_bucket_refuses_a_wait_past_the_deadline_and_reserves_nothing():
    t = FakeTime()
    bucket = TokenBucket(6, clock=t.clock, sleep=t.sleep)  # one every 10 s

    async def main():
        await bucket.take(deadline=t.now + 1)
        with pytest.raises(NoTimeToWait, match="rate limit of 6 requests a minute"):
            await bucket.take(deadline=t.now + 5)
        # the refused request took no token: the next still waits only 10 s
        await bucket.take(deadline=t.now + 10)
        assert t.slept == pytest.approx([10.0])

    asyncio.run(main())


def test_bucket_gives_back_the_token_of_a_cancelled_wait():
    bucket = TokenBucket(60)

    async def main():
        await bucket.take()
        waiting = asyncio.ensure_future(bucket.take())
        await asyncio.sleep(0)
        waiting.cancel()
        with pytest.raises(asyncio.CancelledError):
            await waiting
        assert bucket.wait_for_next() <= 1.0

    asyncio.run(main())


def test_bucket_checks_its_settings():
    with pytest.raises(ValueError):
        TokenBucket(0)
    with pytest.raises(ValueError):
        TokenBucket(10, burst=0)


# --- the shared pool ----------------------------------------------------------------------------

def test_clients_and_gates_are_shared_per_event_loop():
    async def first():
        with lease() as a:
            pass
        with lease() as b:
            assert b is a  # an idle shard is leased again
        g1 = endpoint_gate("POST", URL, 4, None)
        assert endpoint_gate("POST", URL, 4, None) is g1
        assert endpoint_gate("POST", URL, 8, None) is not g1
        assert endpoint_gate("POST", URL, 4, 30.0).bucket is not None and g1.bucket is None
        await close_shared_clients()
        assert a.is_closed
        with lease() as c:
            assert c is not a
        return weakref.ref(c), g1

    old_client, old_gate = asyncio.run(first())

    async def second():
        assert endpoint_gate("POST", URL, 4, None) is not old_gate
        with lease() as d:
            assert d is not old_client()
        await close_shared_clients()

    asyncio.run(second())
    gc.collect()
    # the first loop's client (never closed) was dropped with its loop
    assert old_client() is None


def test_calls_in_flight_spread_over_small_shards():
    async def main():
        with contextlib.ExitStack() as stack:
            held = [stack.enter_context(lease()) for _ in range(2 * SHARD_CONNECTIONS + 1)]
            assert len(open_clients()) == 3
            assert held.count(held[0]) == SHARD_CONNECTIONS
        # all idle again: the next call takes one of the shards already open
        with lease() as again:
            assert again in held and len(open_clients()) == 3
        # calls fill the busiest shard with room first, so a call that ends and the next
        # that starts meet on the same shard (and its idle connection)
        with contextlib.ExitStack() as stack:
            first = [stack.enter_context(lease()) for _ in range(SHARD_CONNECTIONS - 1)]
            assert len(set(first)) == 1
            with lease() as last_seat:
                assert last_seat is first[0]
            with lease() as next_call:
                assert next_call is first[0]
        await close_shared_clients()
        assert open_clients() == []

    asyncio.run(main())


# --- answer shapes ------------------------------------------------------------------------------

def test_chat_messages_preset(router):
    route = router.post(URL).mock(return_value=chat(GOOD, prompt_tokens=812,
                                                    completion_tokens=96))
    guess, notes = ask(make_guesser(sampling={"temperature": 0.2}))
    assert guess.text == GOOD and guess.attempt == 1 and notes == []
    assert (guess.usage.input_tokens, guess.usage.output_tokens) == (812, 96)
    assert guess.usage.seconds > 0
    request = route.calls.last.request
    assert request.headers["authorization"] == f"Bearer {KEY}"
    assert request.headers["content-type"] == "application/json"
    body = sent_json(route.calls.last)
    assert body["model"] == "harbour-planner" and body["temperature"] == 0.2
    roles = [m["role"] for m in body["messages"]]
    assert roles == ["system", "user"]
    assert "(:action drive" in body["messages"][1]["content"]  # the domain's PDDL text
    assert guess.prompt and "harbour" in guess.prompt


def test_history_is_sent_as_turns(router):
    route = router.post(URL).mock(return_value=chat(GOOD))
    earlier = Attempt(round=1, text=NO_PLAN, feedback="No plan steps could be read.")
    guess, _ = ask(make_guesser(), round_=2, history=[earlier])
    messages = sent_json(route.calls.last)["messages"]
    assert [m["role"] for m in messages] == ["system", "user", "assistant", "user"]
    assert messages[2]["content"] == NO_PLAN
    assert "No plan steps could be read." in messages[3]["content"]
    # what the trace records as sent this round: the new turn only
    assert "No plan steps could be read." in guess.prompt and "(define" not in guess.prompt


def test_prompt_text_preset_estimates_missing_usage(router):
    route = router.post(URL).mock(return_value=httpx.Response(200, json={"text": GOOD}))
    guess, _ = ask(make_guesser(preset="prompt-text", model=None))
    body = sent_json(route.calls.last)
    assert list(body) == ["prompt"]
    assert guess.text == GOOD
    # No usage in the answer: word-count estimates (adapters/tokens.py) of what was sent and got.
    assert guess.usage.input_tokens == estimate_tokens(body["prompt"])
    assert guess.usage.output_tokens == estimate_tokens(GOOD)


def test_custom_body_and_paths(router):
    route = router.post(URL).mock(return_value=httpx.Response(200, json={
        "output": [{"content": GOOD}], "meta": {"tokens_in": 50, "cost": 0.0125}}))
    guesser = make_guesser(
        preset="custom",
        body={"input": {"text": "{{prompt}}", "turn": "{{round}}", "label": "task {{task_id}}"},
              "options": {"temperature": "{{sampling.temperature}}",
                          "seed": "{{sampling.seed}}"}},
        answer={"text": "output[0].content", "input_tokens": "meta.tokens_in",
                "output_tokens": "meta.tokens_out", "cost": "meta.cost"},
        sampling={"temperature": 0.2})
    guess, _ = ask(guesser, round_=3, settings={"temperature": 0.7})
    body = sent_json(route.calls.last)
    assert body["input"]["turn"] == 3 and body["input"]["label"] == "task harbour"
    # the request's own settings override the file's; an unset one is left out
    assert body["options"] == {"temperature": 0.7}
    assert "temperature" not in body  # the template placed sampling itself
    assert guess.usage.input_tokens == 50 and guess.usage.cost == 0.0125
    assert guess.usage.output_tokens == estimate_tokens(GOOD)  # its path is missing


def test_text_format_takes_the_whole_body(router):
    router.post(URL).mock(return_value=httpx.Response(
        200, content=GOOD.encode("utf-8"), headers={"content-type": "text/plain; charset=utf-8"}))
    guess, _ = ask(make_guesser(preset="custom", body={"q": "{{prompt}}"},
                                answer={"format": "text"}))
    assert guess.text == GOOD


def test_an_answer_without_a_plan_is_an_answer(router):
    router.post(URL).mock(return_value=chat(NO_PLAN))
    guess, notes = ask(make_guesser())
    assert guess.text == NO_PLAN and notes == []


# --- transient faults: retried ------------------------------------------------------------------

def test_429_with_retry_after_seconds(router):
    route = router.post(URL)
    route.side_effect = [httpx.Response(429, headers={"Retry-After": "0"}), chat(GOOD)]
    guess, notes = ask(make_guesser())
    assert guess.attempt == 2 and route.call_count == 2
    [note] = notes
    assert note.attempt == 1 and note.wait_seconds == 0.0
    assert "429" in note.reason and "Retry-After" in note.reason


def test_429_with_retry_after_http_date(router):
    # Source: RFC 9110 sec. 10.2.3 (HTTP-date form; the sec. 5.6.7 example date, long past,
    # so the wait is 0).
    route = router.post(URL)
    route.side_effect = [httpx.Response(429, headers={"Retry-After":
                                                      "Sun, 06 Nov 1994 08:49:37 GMT"}),
                         chat(GOOD)]
    guess, notes = ask(make_guesser())
    assert guess.attempt == 2 and [n.wait_seconds for n in notes] == [0.0]


def test_5xx_burst_backs_off_exponentially(router):
    route = router.post(URL)
    route.side_effect = [httpx.Response(500), httpx.Response(502), httpx.Response(503),
                         chat(GOOD)]
    guess, notes = ask(make_guesser())
    assert guess.attempt == 4 and route.call_count == 4
    assert [n.attempt for n in notes] == [1, 2, 3]
    assert ["500" in notes[0].reason, "502" in notes[1].reason, "503" in notes[2].reason] \
        == [True, True, True]
    # Exponential back-off with jitter (common practice): first_wait * 2**(n-1), stretched
    # by at most the jitter fraction (0.5), never past longest_wait (0.2).
    for n, note in enumerate(notes, start=1):
        base = 0.01 * 2 ** (n - 1)
        assert base <= note.wait_seconds <= min(base * 1.5, 0.2)
    assert guess.usage.seconds >= sum(n.wait_seconds for n in notes)


def test_transient_status_until_no_tries_left(router):
    route = router.post(URL).mock(return_value=httpx.Response(503))
    error, notes = fail(make_guesser(), EndpointBusy)
    assert error.status == 503 and error.attempt == 4 and route.call_count == 4
    assert len(notes) == 3
    assert "no tries left" in error.reason and "503" in error.reason


def test_408_is_transient_and_other_4xx_are_not(router):
    # Source: RFC 9110 sec. 15.5.9 (408 Request Timeout: the client may repeat the request).
    route = router.post(URL)
    route.side_effect = [httpx.Response(408), chat(GOOD)]
    guess, _ = ask(make_guesser())
    assert guess.attempt == 2


@pytest.mark.parametrize("status, hint", [(400, "it said"), (401, "credentials"),
                                          (404, "guesser.http.url"), (422, "it said")])
def test_non_transient_4xx_fails_at_once(router, status, hint):
    route = router.post(URL).mock(return_value=httpx.Response(
        status, json={"error": f"rejected: key {KEY} is not valid for this model"}))
    error, notes = fail(make_guesser(), EndpointRefused)
    assert error.status == status and error.attempt == 1 and notes == []
    assert route.call_count == 1
    assert hint in error.reason and str(status) in error.reason
    assert KEY not in error.reason and "***" in error.reason  # the server echoed the key


def test_read_timeout_then_answer(router):
    route = router.post(URL)
    route.side_effect = [httpx.ReadTimeout("timed out"), httpx.ConnectTimeout("timed out"),
                         chat(GOOD)]
    guess, notes = ask(make_guesser())
    assert guess.attempt == 3
    assert "timeouts.read" in notes[0].reason and "timeouts.connect" in notes[1].reason


def test_timeouts_until_no_tries_left(router):
    router.post(URL).mock(side_effect=httpx.ReadTimeout("timed out"))
    error, notes = fail(make_guesser(retries=dict(attempts=2, first_wait=0.01)),
                        EndpointTimedOut)
    assert error.attempt == 2 and len(notes) == 1


def test_whole_call_timeout(router):
    async def stalled():
        yield b'{"choices": ['
        await asyncio.sleep(30)
        yield b"]}"

    router.post(URL).mock(side_effect=lambda request: httpx.Response(
        200, headers={"content-type": "application/json"}, content=stalled()))
    error, notes = fail(make_guesser(timeouts=dict(call=0.05),
                                     retries=dict(attempts=2, first_wait=0.01)),
                        EndpointTimedOut)
    assert "timeouts.call" in error.reason and error.attempt == 2 and len(notes) == 1


def test_connection_reset_then_answer(router):
    route = router.post(URL)
    route.side_effect = [httpx.ReadError("[Errno 104] Connection reset by peer"), chat(GOOD)]
    guess, notes = ask(make_guesser())
    assert guess.attempt == 2 and "connection broke" in notes[0].reason


def test_no_connection_at_all(router):
    router.post(URL).mock(side_effect=httpx.ConnectError("[Errno 111] Connection refused"))
    error, notes = fail(make_guesser(retries=dict(attempts=3, first_wait=0.01)),
                        EndpointUnreachable)
    assert error.attempt == 3 and len(notes) == 2
    assert "no connection could be made" in error.reason and "no tries left" in error.reason


def test_body_cut_by_a_broken_connection_is_retried(router):
    async def cut():
        yield b'{"choices": [{"message": {"content": "(lift carrier-7'
        # what h11 reports when the peer closes before Content-Length bytes arrived
        raise httpcore.RemoteProtocolError("peer closed connection without sending complete "
                                           "message body: received 52 bytes, expected 400")

    route = router.post(URL)
    route.side_effect = [httpx.Response(200, headers={"content-type": "application/json"},
                                        content=cut()), chat(GOOD)]
    guess, notes = ask(make_guesser())
    assert guess.attempt == 2 and "before the whole answer arrived" in notes[0].reason


# --- unreadable answers: not retried ------------------------------------------------------------

def test_truncated_json_is_unreadable(router):
    route = router.post(URL).mock(return_value=httpx.Response(
        200, content=b'{"choices": [{"message": {"content": "(lift carrier-7',
        headers={"content-type": "application/json"}))
    error, notes = fail(make_guesser(), AnswerUnreadable)
    assert "not valid JSON" in error.reason and route.call_count == 1 and notes == []


def test_non_json_body_is_unreadable(router):
    router.post(URL).mock(return_value=httpx.Response(
        200, content=b"upstream says: all good", headers={"content-type": "application/json"}))
    error, _ = fail(make_guesser(), AnswerUnreadable)
    assert "not valid JSON" in error.reason and "upstream says" in error.reason


def test_wrong_content_type_is_unreadable(router):
    router.post(URL).mock(return_value=httpx.Response(
        200, text="<html><body><h1>Gateway login</h1></body></html>",
        headers={"content-type": "text/html; charset=utf-8"}))
    error, _ = fail(make_guesser(), AnswerUnreadable)
    assert "text/html" in error.reason and "not JSON" in error.reason


def test_a_streamed_answer_says_how_to_turn_streaming_off(router):
    # Source: the WHATWG HTML Living Standard, "Server-sent events" (text/event-stream,
    # "data:" lines), from memory.
    router.post(URL).mock(return_value=httpx.Response(
        200, text='data: {"choices": [{"delta": {"content": "(lift"}}]}\n\n',
        headers={"content-type": "text/event-stream"}))
    error, _ = fail(make_guesser(), AnswerUnreadable)
    assert "text/event-stream, not JSON" in error.reason and "`stream`" in error.reason


def test_problem_json_is_json(router):
    # Source: RFC 6839 sec. 3.1: "+json" media types are JSON.
    router.post(URL).mock(return_value=httpx.Response(
        200, content=json.dumps({"choices": [{"message": {"content": GOOD}}]}).encode(),
        headers={"content-type": "application/vnd.planner+json"}))
    guess, _ = ask(make_guesser())
    assert guess.text == GOOD


@pytest.mark.parametrize("answer, expected", [
    ({"error": "model overloaded", "detail": "try later"},
     "no 'choices' at the top; it holds keys error, detail"),
    ({"choices": []}, "holds 0 items"),
    ({"choices": [{"message": {"content": None}}]}, "holds null, not the answer text"),
    ({"choices": [{"message": {"content": ["(lift)"]}}]}, "holds a list"),
])
def test_json_without_the_configured_text(router, answer, expected):
    router.post(URL).mock(return_value=httpx.Response(200, json=answer))
    error, _ = fail(make_guesser(), AnswerUnreadable)
    assert expected in error.reason and "choices[0].message.content" in error.reason


def test_oversize_answer_announced_by_content_length(router):
    router.post(URL).mock(return_value=httpx.Response(
        200, content=b"x" * 1000, headers={"content-type": "application/json"}))
    error, notes = fail(make_guesser(limits=dict(max_answer_bytes=200)), AnswerTooLarge)
    assert "1000 bytes" in error.reason and "limits.max_answer_bytes" in error.reason
    assert notes == []


def test_oversize_answer_streamed_is_cut(router):
    sent = []

    async def endless():
        for i in range(100):
            sent.append(i)
            yield b" " * 64

    router.post(URL).mock(side_effect=lambda request: httpx.Response(
        200, headers={"content-type": "application/json"}, content=endless()))
    error, _ = fail(make_guesser(limits=dict(max_answer_bytes=200)), AnswerTooLarge)
    assert "grew past the limit of 200 bytes" in error.reason
    assert len(sent) < 10  # reading stopped at the limit, not at the end


# --- waits that do not fit ----------------------------------------------------------------------

def test_retry_after_past_the_budget_fails_at_once(router):
    route = router.post(URL).mock(return_value=httpx.Response(429,
                                                              headers={"Retry-After": "30"}))
    error, notes = fail(make_guesser(retries=dict(longest_wait=60)), EndpointBusy,
                        deadline_in=5)
    assert route.call_count == 1 and notes == [] and error.attempt == 1
    assert "asked to wait 30 s" in error.reason and "time budget" in error.reason


def test_retry_after_date_past_the_budget_fails_at_once(router):
    later = format_datetime(datetime.now(timezone.utc) + timedelta(seconds=40), usegmt=True)
    route = router.post(URL).mock(return_value=httpx.Response(503,
                                                              headers={"Retry-After": later}))
    error, notes = fail(make_guesser(retries=dict(longest_wait=60)), EndpointBusy,
                        deadline_in=5)
    assert route.call_count == 1 and notes == [] and "time budget" in error.reason


def test_retry_after_longer_than_longest_wait_fails_at_once(router):
    route = router.post(URL).mock(return_value=httpx.Response(503,
                                                              headers={"Retry-After": "120"}))
    error, _ = fail(make_guesser(retries=dict(longest_wait=60)), EndpointBusy)
    assert route.call_count == 1 and "retries.longest_wait" in error.reason


def test_backoff_past_the_budget_fails_at_once(router):
    route = router.post(URL).mock(return_value=httpx.Response(502))
    error, notes = fail(make_guesser(retries=dict(first_wait=10, longest_wait=60, jitter=0)),
                        EndpointBusy, deadline_in=3)
    assert route.call_count == 1 and notes == [] and "time budget" in error.reason


# --- limits shared by every loop ----------------------------------------------------------------

def test_concurrency_gate_is_shared_by_guessers_and_loops(router):
    in_flight = {"now": 0, "most": 0}

    async def slow(request):
        in_flight["now"] += 1
        in_flight["most"] = max(in_flight["most"], in_flight["now"])
        await asyncio.sleep(0.01)
        in_flight["now"] -= 1
        return chat(GOOD)

    router.post(URL).mock(side_effect=slow)
    # two guesser objects built from the same settings share the endpoint's gate
    a, b = make_guesser(limits=dict(concurrency=2)), make_guesser(limits=dict(concurrency=2))

    async def main():
        requests = [GuessRequest(task=TASK, round=1) for _ in range(8)]
        try:
            return await asyncio.gather(*(g.guess(r) for g, r in
                                          zip([a, b] * 4, requests)))
        finally:
            await close_shared_clients()

    guesses = asyncio.run(main())
    assert len(guesses) == 8 and in_flight["most"] == 2


def test_rate_limit_wait_past_the_budget_fails_at_once(router):
    route = router.post(URL).mock(return_value=chat(GOOD))
    guesser = make_guesser(limits=dict(requests_per_minute=1))

    async def main():
        try:
            await guesser.guess(GuessRequest(task=TASK, round=1))
            with pytest.raises(NoTimeToWait, match="rate limit of 1 requests a minute") as info:
                await guesser.guess(GuessRequest(task=TASK, round=2,
                                                 deadline=time.monotonic() + 5))
            return info.value
        finally:
            await close_shared_clients()

    error = asyncio.run(main())
    assert route.call_count == 1 and error.guesser == "http"


def test_one_guesser_serves_many_rounds_at_once(router):
    """No per-run state: concurrent rounds with their own retries do not mix."""
    failed_once: set[int] = set()

    async def echo(request):
        round_ = json.loads(request.content)["round"]
        await asyncio.sleep(0.001 * (round_ % 5))
        if round_ % 2 and round_ not in failed_once:
            failed_once.add(round_)
            return httpx.Response(503, headers={"Retry-After": "0"})
        return httpx.Response(200, json={"echo": f"answer for round {round_}"})

    router.post(URL).mock(side_effect=echo)
    guesser = make_guesser(preset="custom", body={"prompt": "{{prompt}}", "round": "{{round}}"},
                           answer={"text": "echo"})
    notes: dict[int, list] = {}

    async def main():
        def request(n):
            notes[n] = []
            return GuessRequest(task=TASK, round=n, on_retry=notes[n].append)
        try:
            return await asyncio.gather(*(guesser.guess(request(n)) for n in range(1, 21)))
        finally:
            await close_shared_clients()

    guesses = asyncio.run(main())
    for n, guess in enumerate(guesses, start=1):
        assert guess.text == f"answer for round {n}"
        assert guess.attempt == (2 if n % 2 else 1)
        assert [x.attempt for x in notes[n]] == ([1] if n % 2 else [])


# --- settings errors ----------------------------------------------------------------------------

def test_missing_environment_variable():
    with pytest.raises(InputError) as info:
        HttpGuesser(make_settings(), env={})
    spot = info.value.first
    assert spot.field == "guesser.http.headers.Authorization" and "PLANNER_KEY" in spot.message


def test_bad_answer_path():
    with pytest.raises(InputError) as info:
        HttpGuesser(make_settings(answer={"text": "choices[0.message"}), env=ENV)
    assert info.value.first.field == "guesser.http.answer.text"
    assert "column" in info.value.first.message


def test_unknown_body_placeholder():
    with pytest.raises(InputError) as info:
        HttpGuesser(make_settings(preset="custom", body={"prompt": "{{promt}}"},
                                  answer={"text": "text"}), env=ENV)
    assert info.value.first.field == "guesser.http.body.prompt"


@pytest.mark.parametrize("url", ["ftp://planner.test/x", "planner.test/v1", "http://"])
def test_url_must_be_http(url):
    with pytest.raises(InputError) as info:
        HttpGuesser(make_settings(url=url), env=ENV)
    assert info.value.first.field == "guesser.http.url"


def test_header_values_a_header_cannot_carry():
    env = {"PLANNER_KEY": "line-one\nHost: elsewhere"}
    with pytest.raises(InputError) as info:
        HttpGuesser(make_settings(), env=env)
    assert info.value.first.field == "guesser.http.headers.Authorization"
    assert "line break" in info.value.first.message and "elsewhere" not in str(info.value)
    with pytest.raises(InputError):
        HttpGuesser(make_settings(headers={"Bad Name": "x"}), env=ENV)


def test_request_settings_that_are_not_json(router):
    router.post(URL).mock(return_value=chat(GOOD))

    async def main():
        try:
            await make_guesser().guess(GuessRequest(task=TASK, round=1,
                                                    settings={"stop": {"a", "b"}}))
        finally:
            await close_shared_clients()

    with pytest.raises(GuesserFailed, match="cannot be written as JSON"):
        asyncio.run(main())


def test_a_client_of_the_callers_own():
    seen = []

    def handler(request: httpx.Request) -> httpx.Response:
        seen.append(request)
        return chat(GOOD)

    async def main():
        async with httpx.AsyncClient(transport=httpx.MockTransport(handler)) as client:
            guesser = HttpGuesser(make_settings(method="PUT"), env=ENV, client=client)
            guess = await guesser.guess(GuessRequest(task=TASK, round=1))
            await guesser.aclose()  # leaves the caller's client open
            assert not client.is_closed
            return guess

    assert asyncio.run(main()).text == GOOD
    assert [r.method for r in seen] == ["PUT"]


def test_aclose_closes_the_shared_pool(router):
    router.post(URL).mock(return_value=chat(GOOD))

    async def main():
        guesser = make_guesser()
        await guesser.guess(GuessRequest(task=TASK, round=1))
        clients = open_clients()
        assert len(clients) == 1
        await guesser.aclose()
        assert clients[0].is_closed and open_clients() == []
        # a later call opens a fresh pool
        await guesser.guess(GuessRequest(task=TASK, round=2))
        await guesser.aclose()

    asyncio.run(main())


# --- secrets ------------------------------------------------------------------------------------

def test_secrets_reach_no_text_no_log(router, caplog):
    caplog.set_level(logging.DEBUG)
    route = router.post(url__startswith=URL)
    route.side_effect = [httpx.Response(503, json={"error": f"busy, key {KEY}"}),
                         httpx.Response(401, json={"error": f"bad key {KEY}"})]
    guesser = HttpGuesser(make_settings(url=URL + "?api_key=${PLANNER_KEY}&v=2"), env=ENV)
    error, notes = fail(guesser, EndpointRefused)
    assert route.calls.last.request.url.params["api_key"] == KEY  # it was sent...
    shown = json.dumps(guesser.describe())
    texts = [error.reason, str(error), shown, *(n.reason for n in notes),
             *(r.getMessage() for r in caplog.records)]
    for text in texts:                                             # ...and shown nowhere
        assert KEY not in text
    assert "${PLANNER_KEY}" in shown and "Bearer ${PLANNER_KEY}" in shown
    ours = [r for r in caplog.records if r.name == "plansieve.http"]
    assert ours and all("planner.test" in r.getMessage() for r in ours)


def test_literal_key_in_a_header_is_scrubbed_too(router):
    router.post(URL).mock(return_value=httpx.Response(403, text="key abc-literal-999 revoked"))
    guesser = HttpGuesser(make_settings(headers={"X-Api-Key": "abc-literal-999"}), env={})
    error, _ = fail(guesser, EndpointRefused)
    assert "abc-literal-999" not in error.reason
    assert "abc-literal-999" not in json.dumps(guesser.describe())


def test_a_token_written_as_the_whole_userinfo_is_scrubbed(router):
    # Source: RFC 3986 sec. 3.2.1 — userinfo may hold a user name alone; services that take
    # a token there (common practice) put the whole secret in it.
    secret_url = URL.replace("://", "://tok-userinfo-4242@")
    router.post(url__startswith=URL.split("://")[0]).mock(
        return_value=httpx.Response(400, text="token tok-userinfo-4242 is not allowed here"))
    guesser = HttpGuesser(make_settings(url=secret_url), env=ENV)
    error, _ = fail(guesser, EndpointRefused)
    assert "tok-userinfo-4242" not in error.reason
    assert "tok-userinfo-4242" not in json.dumps(guesser.describe())


# --- through the loop ---------------------------------------------------------------------------

def _run(guesser, budget):
    sink = MemorySink()

    async def main():
        try:
            return await sieve(TASK, guesser, budget=budget,
                               trace=TraceWriter(sink, run_id="http-test"), task_id="harbour")
        finally:
            await close_shared_clients()

    return asyncio.run(main()), sink


def test_loop_records_every_try(router):
    route = router.post(URL)
    route.side_effect = [httpx.Response(503), httpx.Response(429, headers={"Retry-After": "0"}),
                         chat(NO_PLAN), chat(GOOD)]
    outcome, sink = _run(make_guesser(), at_most_rounds(5))
    assert outcome.verified and outcome.rounds == 2
    events = [e for e in sink.events if e["kind"] in ("guess-failed", "guess-received")]
    assert [(e["kind"], e["round"], e["attempt"], e.get("retry")) for e in events] == [
        ("guess-failed", 1, 1, True), ("guess-failed", 1, 2, True),
        ("guess-received", 1, 3, None), ("guess-received", 2, 1, None)]
    assert events[1]["wait_seconds"] == 0.0 and "429" in events[1]["reason"]
    assert outcome.totals.guesser_calls == route.call_count == 4
    # the answer without a plan drew feedback, which round 2 carried as a user turn
    [feedback] = [e for e in sink.events if e["kind"] == "feedback"]
    messages = sent_json(route.calls.last)["messages"]
    assert messages[2] == {"role": "assistant", "content": NO_PLAN}
    assert feedback["text"] in messages[3]["content"]
    assert KEY not in sink.content().decode()


def test_retries_do_not_use_up_rounds(router):
    route = router.post(URL)
    route.side_effect = [httpx.Response(503), httpx.Response(503), chat(NO_PLAN), chat(GOOD)]
    outcome, _ = _run(make_guesser(), at_most_rounds(2))
    assert outcome.verified and outcome.rounds == 2 and route.call_count == 4


def test_loop_stops_with_the_guessers_reason(router):
    route = router.post(URL).mock(return_value=httpx.Response(502))
    outcome, sink = _run(make_guesser(retries=dict(attempts=3, first_wait=0.01)),
                         at_most_rounds(3))
    assert not outcome.verified and outcome.stop == "guesser-failed"
    assert "502" in outcome.detail and "no tries left" in outcome.detail
    failed = [(e["attempt"], e["retry"]) for e in sink.events if e["kind"] == "guess-failed"]
    assert failed == [(1, True), (2, True), (3, False)] and route.call_count == 3


def test_loop_budget_caps_retry_after(router):
    # a server that keeps asking for 30 s, a run with 5 s: the round fails at once
    route = router.post(URL).mock(return_value=httpx.Response(503, headers={"Retry-After": "30"}))
    outcome, sink = _run(make_guesser(retries=dict(longest_wait=60)),
                         at_most_seconds(5) | at_most_rounds(3))
    assert outcome.stop == "guesser-failed" and "time budget" in outcome.detail
    assert route.call_count == 1
    failed = [(e["attempt"], e["retry"]) for e in sink.events if e["kind"] == "guess-failed"]
    assert failed == [(1, False)]


def test_short_everyday_values_from_the_environment_do_not_spoil_answers(router):
    # A port and a region filled in from the environment are not credentials: scrubbing
    # "1" or "eu" out of every answer would change the plan itself. A key in a sensitive
    # header is hidden whatever its length.
    router.post(url__startswith="http://planner.test:1/").mock(
        return_value=chat("(lift carrier-1 crate-1 eu-dock) ; key zq9"))
    guesser = HttpGuesser(make_settings(
        url="http://planner.test:${PORT}/v1/chat",
        headers={"X-Region": "${REGION}", "X-Api-Key": "${SHORT_KEY}"}),
        env={"PORT": "1", "REGION": "eu", "SHORT_KEY": "zq9"})
    guess, _ = ask(guesser)
    assert guess.text == "(lift carrier-1 crate-1 eu-dock) ; key ***"
