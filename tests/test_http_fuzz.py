"""Whatever an endpoint answers, the HTTP guesser gives a guess or one of its typed failures.

Hypothesis draws the status, the content type, the Retry-After header and the body:
random bytes, random JSON values, and JSON near the chat-messages shape with parts
missing or of the wrong type (the shape itself from memory). respx stands in for the
endpoint. No other exception may escape, and the key never shows in what comes back.
Default size is small; ``PLANSIEVE_FUZZ_EXAMPLES`` (``make fuzz``) sets the full size.
"""

from __future__ import annotations

import asyncio
import json
import os
from pathlib import Path

import httpx
import respx
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from plansieve.adapters.guesser import Guess, GuesserFailed, GuessRequest
from plansieve.adapters.http_guesser import HttpGuesser
from plansieve.adapters.http_pool import close_shared_clients
from plansieve.adapters.http_settings import HttpSettings
from plansieve.critics.pddl import load_task

HARBOUR = Path(__file__).resolve().parents[1] / "examples" / "harbour"
TASK = load_task(HARBOUR / "domain.pddl", HARBOUR / "problem.pddl")
URL = "http://planner.test/v1/chat"
KEY = "sk-fuzz-5d2c81aa"
EXAMPLES = int(os.environ.get("PLANSIEVE_FUZZ_EXAMPLES", "150"))

GUESSER = HttpGuesser(HttpSettings.model_validate({
    "url": URL, "headers": {"Authorization": "Bearer ${KEY}"},
    "retries": {"attempts": 2, "first_wait": 0.0, "longest_wait": 0.05, "jitter": 0.0},
    "timeouts": {"connect": 0.5, "read": 0.5, "call": 1.0},
    "limits": {"max_answer_bytes": 4096},
}), env={"KEY": KEY})

json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                                max_size=4),
    max_leaves=12)
near_chat = st.fixed_dictionaries({}, optional={
    "choices": st.one_of(json_values, st.lists(st.fixed_dictionaries({}, optional={
        "message": st.one_of(json_values, st.fixed_dictionaries({}, optional={
            "content": st.one_of(st.text(), json_values, st.just(KEY))}))}), max_size=2)),
    "usage": st.one_of(json_values, st.fixed_dictionaries({}, optional={
        "prompt_tokens": json_values, "completion_tokens": json_values})),
})
well_formed = st.builds(
    lambda text, inp, out: json.dumps({"choices": [{"message": {"content": text}}],
                                       "usage": {"prompt_tokens": inp,
                                                 "completion_tokens": out}}).encode(),
    st.text() | st.just(KEY) | st.just("(lift carrier-7 reefer-12 east-stack)"),
    json_values, json_values)
bodies = st.one_of(
    well_formed, well_formed,
    st.binary(max_size=300),
    json_values.map(lambda v: json.dumps(v).encode()),
    near_chat.map(lambda v: json.dumps(v).encode()),
    st.just(b"x" * 5000),  # past max_answer_bytes
)
statuses = st.sampled_from([200] * 12 + [201, 204, 301, 400, 401, 404, 408, 422, 429, 500,
                            502, 503, 504, 599])
content_types = st.sampled_from([None, "application/json", "application/json",
                                 "application/json; charset=utf-8",
                                 "application/problem+json", "text/plain", "text/html",
                                 "text/event-stream", "application/octet-stream"])
retry_afters = st.one_of(st.none(), st.sampled_from(["0", "1", "-1", "soon", "120",
                                                     "Sun, 06 Nov 1994 08:49:37 GMT"]),
                         st.text(max_size=12))


@settings(max_examples=EXAMPLES, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(answers=st.lists(st.tuples(statuses, content_types, retry_afters, bodies),
                        min_size=2, max_size=2))
def test_any_answer_gives_a_guess_or_a_typed_failure(answers):
    def reply(request: httpx.Request) -> httpx.Response:
        status, ctype, retry_after, body = answers[min(len(seen), 1)]
        seen.append(request)
        headers = {}
        if ctype is not None:
            headers["content-type"] = ctype
        if retry_after is not None and retry_after.isprintable() and retry_after.isascii():
            headers["retry-after"] = retry_after
        return httpx.Response(status, content=body, headers=headers)

    seen: list[httpx.Request] = []

    async def main():
        try:
            return await GUESSER.guess(GuessRequest(task=TASK, round=1, task_id="fuzz"))
        finally:
            await close_shared_clients()

    with respx.mock:
        respx.post(URL).mock(side_effect=reply)
        try:
            result = asyncio.run(main())
        except GuesserFailed as e:
            result = e
    assert isinstance(result, (Guess, GuesserFailed))
    event(type(result).__name__)
    assert 1 <= len(seen) <= 2
    shown = result.reason if isinstance(result, GuesserFailed) else result.text + str(result.prompt)
    assert KEY not in shown
