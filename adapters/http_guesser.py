"""The HTTP guesser: plans from any endpoint the user configures.

Each round builds the request body from the settings' template (the prompt or the
message list from :mod:`plansieve.adapters.prompts`), sends it, and reads the
answer text and the token counts from the paths the settings name. Transient
trouble — a connection that fails or breaks, a timeout, status 408, 429, 500, 502,
503 or 504 — is tried again (tenacity drives the loop); every other failure ends the
round at once with a typed error (:mod:`plansieve.adapters.http_errors`).

Waits between tries grow exponentially with jitter, or follow the server's
``Retry-After``. A wait is never started if it would end after the run's time
budget or be longer than ``retries.longest_wait``: the round fails at once instead,
saying why, since the loop would only cut the wait off later with less said.
Each failed try that will be tried again is reported to the loop through
``request.retrying`` before its wait, so the trace shows every try.

One instance serves any number of loops at once: it keeps only its settings. The
connection pool and the endpoint's concurrency and rate limits are shared per event
loop (:mod:`plansieve.adapters.http_pool`). Credentials — values filled in from the
environment into sensitive headers or the URL's credentials, any other filled-in value
of 8 characters or more, and keys written literally into sensitive headers or the URL —
are scrubbed out of everything the guesser returns, raises or logs; headers are never
logged.
"""

from __future__ import annotations

import asyncio
import contextlib
import http
import json
import logging
import os
import random
import re
import time
import weakref
from collections.abc import Mapping
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import httpx
from tenacity import AsyncRetrying, RetryCallState, retry_if_exception_type

from plansieve.adapters.guesser import Guess, GuesserFailed, GuessRequest, RetryNote, Usage
from plansieve.adapters.http_errors import (
    AnswerTooLarge, AnswerUnreadable, EndpointBusy, EndpointRefused, EndpointTimedOut,
    EndpointUnreachable, NoTimeToWait, with_attempt,
)
from plansieve.adapters.http_pool import close_shared_clients, endpoint_gate, lease
from plansieve.adapters.http_settings import TRANSIENT_STATUS, HttpSettings
from plansieve.adapters.json_path import PathMissing, describe, lookup, parse_path, show_path
from plansieve.adapters.placeholders import (
    BODY_NAMES, check_json_template, fill_json, names_in,
)
from plansieve.adapters.prompts import PromptBook, as_messages, as_prompt
from plansieve.adapters.retry_after import retry_after_seconds
from plansieve.adapters.secrets import (
    Secrets, fill_env, is_sensitive, literal_secrets, mask_header, mask_url,
)
from plansieve.adapters.tokens import estimate_tokens
from plansieve.critics.errors import InputError, Spot

log = logging.getLogger("plansieve.http")

_FIELD = "guesser.http"
# How much of a refusal's body is read and quoted (its first line, cut short).
_REFUSAL_BYTES = 4096
_QUOTED_CHARS = 160
# How much of an answer that is not JSON is shown, to tell an HTML page from a cut body.
_OPENING_CHARS = 60
# A header name: RFC 9110 sec. 5.1 and 5.6.2 (token = 1*tchar). Values may not hold CR, LF
# or NUL (sec. 5.5); httpx sends them as ASCII.
_TOKEN = re.compile(r"[!#$%&'*+\-.^_`|~0-9A-Za-z]+")


class _Transient(Exception):
    """A failed try worth another: the error it would end in, the wait the server asked
    for, and what the try cost."""

    def __init__(self, error: GuesserFailed, retry_after: float | None = None) -> None:
        super().__init__(error.reason)
        self.error = error
        self.retry_after = retry_after
        self.usage = Usage()


class _ScrubHttpxLog(logging.Filter):
    """httpx logs each request's URL (at INFO, on logger ``httpx``); a URL can carry a
    key in its query, so those records are scrubbed with every live guesser's secrets."""

    def __init__(self) -> None:
        super().__init__()
        self.guessers: "weakref.WeakSet[HttpGuesser]" = weakref.WeakSet()

    def filter(self, record: logging.LogRecord) -> bool:
        guessers = list(self.guessers)
        if guessers:
            text = record.getMessage()
            clean = text
            for g in guessers:
                clean = g._clean(clean)
            if clean != text:
                record.msg, record.args = clean, ()
        return True


_HTTPX_LOG_SCRUBBER = _ScrubHttpxLog()
logging.getLogger("httpx").addFilter(_HTTPX_LOG_SCRUBBER)


# A value filled in from the environment outside a credential's place (a host, a port, a
# region, a model name) is hidden only from this length on: scrubbing a short everyday
# value such as "eu" or "1" out of every answer would spoil the plans themselves. Any
# key worth the name is longer (common practice; not from a standard).
_SHORTEST_SECRET = 8


def _worth_hiding(values: set[str]) -> set[str]:
    return {v for v in values if len(v) >= _SHORTEST_SECRET}


def _phrase(status: int) -> str:
    try:
        return f"{status} ({http.HTTPStatus(status).phrase})"
    except ValueError:
        return str(status)


def _one_line(text: str, limit: int) -> str:
    text = " ".join(text.split())
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _is_json_type(content_type: str | None) -> bool:
    """Whether a Content-Type names JSON: application/json or any ``+json`` type
    (RFC 6839 §3.1); a missing one is given the benefit of the doubt."""
    if not content_type:
        return True
    media = content_type.split(";", 1)[0].strip().lower()
    return media == "application/json" or media.endswith("+json")


class HttpGuesser:
    """Asks an HTTP endpoint for plans, as :class:`HttpSettings` describe it.

    ``env`` is where ``${NAME}`` references are looked up (the process environment by
    default); ``base_dir`` is where relative prompt file paths start; ``client``
    replaces the shared connection pool (its owner closes it); ``source`` names the
    settings' origin (a configuration file) in error messages. Bad settings raise
    InputError here, before any request is made.
    """

    name = "http"

    def __init__(self, settings: HttpSettings, *, env: Mapping[str, str] | None = None,
                 base_dir: Path | None = None, client: httpx.AsyncClient | None = None,
                 source: str = "http settings") -> None:
        env = os.environ if env is None else env
        self.settings = settings
        self._client = client
        filled: set[str] = set()
        self._url = fill_env(settings.url, field=f"{_FIELD}.url", source=source, env=env,
                             found=filled)
        self._shown_url = mask_url(settings.url)
        # Credentials in the URL (userinfo, sensitive query values) are secrets at any length.
        found = self._check_url(source) | _worth_hiding(filled)
        self._headers = {}
        for name, value in settings.headers.items():
            filled = set()
            self._headers[name] = fill_env(value, field=f"{_FIELD}.headers.{name}",
                                           source=source, env=env, found=filled)
            found |= filled if is_sensitive(name) else _worth_hiding(filled)
        found |= literal_secrets(settings.headers)
        self._secrets = Secrets(found)
        self._check_headers(source)
        self._send_headers = self._with_defaults(self._headers)

        paths = settings.answer_paths()
        self._format = paths.format
        self._paths: dict[str, tuple] = {}
        for key in ("text", "input_tokens", "output_tokens", "cost"):
            text = getattr(paths, key)
            if text is None or (key == "text" and paths.format == "text"):
                continue
            try:
                self._paths[key] = parse_path(text)
            except ValueError as e:
                raise InputError(Spot(source, None, None, f"{e} in the path {text!r}",
                                      field=f"{_FIELD}.answer.{key}")) from None
        self._body = settings.request_body()
        check_json_template(self._body, BODY_NAMES, source=source, field=f"{_FIELD}.body")
        used = set(names_in(json.dumps(self._body, ensure_ascii=False)))
        self._used = frozenset(n.split(".", 1)[0] for n in used)
        # sampling settings go to the top level of an object body unless the template
        # places them itself
        self._merge_sampling = isinstance(self._body, dict) and not any(
            n == "sampling" or n.startswith("sampling.") for n in used)
        self._book = PromptBook.load(settings.prompts, base_dir)
        _HTTPX_LOG_SCRUBBER.guessers.add(self)

    # -- set-up -----------------------------------------------------------------------

    def _check_url(self, source: str) -> set[str]:
        """Refuse a URL httpx cannot send to; return the credentials written into it."""
        where = f"{_FIELD}.url"
        try:
            url = httpx.URL(self._url)
        except (httpx.InvalidURL, TypeError, ValueError):
            raise InputError(Spot(source, None, None, f"{self._shown_url!r} is not a URL; "
                                  f"expected http://host[:port]/path or https://...",
                                  field=where)) from None
        if url.scheme not in ("http", "https") or not url.host:
            raise InputError(Spot(source, None, None, f"{self._shown_url!r} is not an "
                                  f"http:// or https:// address with a host", field=where))
        secrets = {url.password} if url.password else set()
        if url.username and not url.password:
            secrets.add(url.username)  # a token written as the whole userinfo
        secrets |= {v for k, v in url.params.multi_items() if is_sensitive(k) and v}
        return secrets

    def _check_headers(self, source: str) -> None:
        """Refuse header names and values HTTP/1.1 cannot carry, before a send fails on
        them with the value in its message. The value itself is never shown."""
        for name, value in self._headers.items():
            where = f"{_FIELD}.headers.{name}"
            if not _TOKEN.fullmatch(name):
                raise InputError(Spot(source, None, None, "not a header name; expected "
                                      "letters, digits and - (an HTTP token)", field=where))
            bad = next((c for c in value if c in "\r\n\0" or not c.isascii()), None)
            if bad is not None:
                what = ("a line break or NUL" if bad in "\r\n\0"
                        else "a character outside ASCII")
                raise InputError(Spot(source, None, None, f"the header value (after filling "
                                      f"in ${{...}}) holds {what}, which a header cannot "
                                      f"carry", field=where))

    def _with_defaults(self, headers: dict[str, str]) -> dict[str, str]:
        given = {k.lower() for k in headers}
        out = dict(headers)
        if "content-type" not in given:
            out["Content-Type"] = "application/json"
        if "accept" not in given and self.settings.answer_paths().format == "json":
            out["Accept"] = "application/json"
        return out

    def describe(self) -> dict[str, Any]:
        """The settings in force, for the trace: URL and sensitive headers masked."""
        s = self.settings
        shown: dict[str, Any] = {
            "url": self._shown_url, "method": s.method, "preset": s.preset,
            "headers": {k: mask_header(k, v) for k, v in s.headers.items()},
            "body": s.request_body(), "answer": s.answer_paths().model_dump(mode="json"),
            "prompts": self._book.describe()}
        shown.update(s.model_dump(mode="json", exclude={"url", "method", "preset", "headers",
                                                        "body", "answer", "prompts"}))
        return self._secrets.scrub_data(shown)

    async def aclose(self) -> None:
        """Close the running event loop's shared connection pool (a client passed in
        is left to its owner). Call it when the loops of this event loop are done."""
        if self._client is None:
            await close_shared_clients()

    # -- the round ----------------------------------------------------------------------

    def _clean(self, text: str) -> str:
        """A text fit to show: the URL masked, every secret starred out."""
        text = text.replace(self._url, self._shown_url)
        return self._secrets.scrub(text)

    def _request_body(self, request: GuessRequest) -> tuple[bytes, str, str]:
        """(the body to send, the prompt text it carries, the new turns for the trace)."""
        conversation = self.settings.conversation
        book = self._book
        turns = book.turns(request, conversation)
        prompt = as_prompt(turns)
        messages = as_messages(turns) if "messages" in self._used else None
        system = book.system(request) if "system" in self._used else None
        # Settings passed with the request (a sweep's temperature) override the file's.
        sampling = {**self.settings.sampling, **request.settings}
        values = {"prompt": prompt, "messages": messages, "system": system,
                  "round": request.round, "task_id": request.task_id,
                  "model": self.settings.model, "sampling": sampling}
        body = fill_json(self._body, values)
        if self._merge_sampling and isinstance(body, dict):
            body = {**body, **sampling}
        try:
            data = json.dumps(body, ensure_ascii=False, allow_nan=False).encode("utf-8")
        except (TypeError, ValueError) as e:
            raise GuesserFailed(self._clean(f"the request body cannot be written as JSON: {e}"),
                                guesser=self.name) from None
        return data, prompt, self._book.new_turns(request, conversation)

    async def guess(self, request: GuessRequest) -> Guess:
        started = time.monotonic()
        try:
            content, prompt, shown = self._request_body(request)
        except ValueError as e:  # e.g. a task without its PDDL source text
            raise GuesserFailed(self._clean(f"no prompt could be built: {e}"),
                                guesser=self.name) from None
        tries = _Tries(self, request)
        retrying = AsyncRetrying(stop=tries.stop, wait=tries.wait,
                                 retry=retry_if_exception_type(_Transient),
                                 before_sleep=tries.before_sleep, reraise=True)
        try:
            async for attempt in retrying:
                with attempt:
                    number = attempt.retry_state.attempt_number
                    text, usage = await self._try(request, content, number)
        except _Transient as t:
            raise tries.final(t) from None
        if "input_tokens" not in usage:
            usage["input_tokens"] = estimate_tokens(prompt)
        if "output_tokens" not in usage:
            usage["output_tokens"] = estimate_tokens(text)
        return Guess(text=self._clean(text), prompt=self._clean(shown), attempt=number,
                     usage=Usage(**usage, seconds=time.monotonic() - started))

    # -- one try ------------------------------------------------------------------------

    async def _try(self, request: GuessRequest, content: bytes,
                   number: int) -> tuple[str, dict[str, Any]]:
        s = self.settings
        gate = endpoint_gate(s.method, self._url, s.limits.concurrency,
                             s.limits.requests_per_minute)
        if gate.bucket is not None:
            try:
                await gate.bucket.take(request.deadline)
            except NoTimeToWait as e:
                raise NoTimeToWait(self._clean(e.reason), guesser=self.name,
                                   attempt=number) from None
        started = time.monotonic()
        async with gate.semaphore:
            try:
                with contextlib.nullcontext(self._client) if self._client else lease() as client:
                    status, body, content_type, charset = await asyncio.wait_for(
                        self._exchange(client, content, number), timeout=s.timeouts.call)
            except _Transient as t:
                t.usage = Usage(seconds=time.monotonic() - started)
                raise
            except asyncio.TimeoutError:  # not the builtin TimeoutError before 3.11
                failure = _Transient(EndpointTimedOut(
                    f"no whole answer within {s.timeouts.call:g} s (timeouts.call)",
                    guesser=self.name, attempt=number))
                failure.usage = Usage(seconds=time.monotonic() - started)
                raise failure from None
        log.debug("try %d at %s: status %d, %d bytes", number, self._shown_url, status, len(body))
        return self._read_answer(body, content_type, charset, number)

    async def _exchange(self, client: httpx.AsyncClient, content: bytes,
                        number: int) -> tuple[int, bytes, str | None, str | None]:
        """Send once and read the answer, cut at the size limit."""
        s = self.settings
        timeout = httpx.Timeout(connect=s.timeouts.connect, read=s.timeouts.read,
                                write=s.timeouts.read, pool=s.timeouts.connect)
        try:
            async with client.stream(s.method, self._url, content=content,
                                     headers=self._send_headers, timeout=timeout) as resp:
                status = resp.status_code
                if status in TRANSIENT_STATUS:
                    await self._read_capped(resp, _REFUSAL_BYTES, number, quiet=True)
                    wait = retry_after_seconds(resp.headers.get("retry-after"),
                                               datetime.now(timezone.utc))
                    reason = f"the endpoint answered {_phrase(status)}"
                    if wait is not None:
                        reason += f" and asked to wait {wait:.3g} s (Retry-After)"
                    log.debug("try %d at %s: status %d, Retry-After %s", number,
                              self._shown_url, status, wait)
                    raise _Transient(EndpointBusy(reason, status=status, guesser=self.name,
                                                  attempt=number), retry_after=wait)
                if not 200 <= status < 300:
                    said = await self._read_capped(resp, _REFUSAL_BYTES, number, quiet=True)
                    log.debug("try %d at %s: status %d", number, self._shown_url, status)
                    raise EndpointRefused(self._clean(self._refusal(status, said, resp)),
                                          status=status, guesser=self.name, attempt=number)
                body = await self._read_capped(resp, s.limits.max_answer_bytes, number)
                return status, body, resp.headers.get("content-type"), resp.charset_encoding
        except httpx.TimeoutException as e:
            kind = {httpx.ConnectTimeout: f"no connection within {s.timeouts.connect:g} s "
                                          f"(timeouts.connect)",
                    httpx.PoolTimeout: f"no free connection within {s.timeouts.connect:g} s",
                    httpx.WriteTimeout: f"the request could not be sent within "
                                        f"{s.timeouts.read:g} s (timeouts.read)"}
            reason = kind.get(type(e), f"the endpoint sent nothing for {s.timeouts.read:g} s "
                                       f"(timeouts.read)")
            log.debug("try %d at %s: %s", number, self._shown_url, reason)
            raise _Transient(EndpointTimedOut(reason, guesser=self.name,
                                              attempt=number)) from None
        except (httpx.UnsupportedProtocol, httpx.LocalProtocolError) as e:
            # not transient; the exception's own text may quote a header, so it is left out
            raise EndpointUnreachable(f"the request could not be sent ({type(e).__name__})",
                                      guesser=self.name, attempt=number) from None
        except httpx.TransportError as e:
            if isinstance(e, (httpx.ConnectError, httpx.ProxyError)):
                what = "no connection could be made"
            elif isinstance(e, httpx.WriteError):
                what = "the connection broke while the request was being sent"
            elif isinstance(e, (httpx.ReadError, httpx.RemoteProtocolError)):
                what = "the connection broke before the whole answer arrived"
            else:
                what = "the connection failed"
            detail = str(e).strip()
            reason = self._clean(f"{what} ({type(e).__name__}{': ' + detail if detail else ''})")
            log.debug("try %d at %s: %s", number, self._shown_url, reason)
            raise _Transient(EndpointUnreachable(reason, guesser=self.name,
                                                 attempt=number)) from None
        except httpx.DecodingError as e:
            raise AnswerUnreadable(self._clean(f"the answer's content encoding could not be "
                                               f"decoded: {e}"), guesser=self.name,
                                   attempt=number) from None

    async def _read_capped(self, resp: httpx.Response, limit: int, number: int,
                           quiet: bool = False) -> bytes:
        """The body, at most ``limit`` bytes; past that, AnswerTooLarge (or, ``quiet``,
        what was read so far: for bodies only quoted in a reason)."""
        declared = resp.headers.get("content-length")
        if not quiet and declared is not None and declared.strip().isdigit() \
                and int(declared) > limit:
            raise AnswerTooLarge(
                f"the endpoint announced an answer of {int(declared)} bytes (Content-Length), "
                f"more than the limit of {limit} bytes (limits.max_answer_bytes)",
                guesser=self.name, attempt=number)
        chunks: list[bytes] = []
        size = 0
        async for chunk in resp.aiter_bytes():
            size += len(chunk)
            if size > limit:
                if quiet:
                    chunks.append(chunk[:limit - (size - len(chunk))])
                    break
                raise AnswerTooLarge(
                    f"the answer grew past the limit of {limit} bytes "
                    f"(limits.max_answer_bytes); reading stopped there",
                    guesser=self.name, attempt=number)
            chunks.append(chunk)
        return b"".join(chunks)

    def _refusal(self, status: int, said: bytes, resp: httpx.Response) -> str:
        reason = f"the endpoint refused the request with {_phrase(status)}"
        if status in (401, 403, 407):
            reason += ("; check the credentials the settings send (guesser.http.headers, "
                       "guesser.http.url)")
        elif status in (404, 405):
            reason += "; check guesser.http.url and guesser.http.method"
        elif 300 <= status < 400:
            reason += "; redirects are not followed, so give the final address as the url"
        text = _one_line(said.decode(resp.charset_encoding or "utf-8", errors="replace"),
                         _QUOTED_CHARS)
        if text:
            reason += f"; it said: {text}"
        return reason

    # -- reading the answer ---------------------------------------------------------------

    def _read_answer(self, body: bytes, content_type: str | None, charset: str | None,
                     number: int) -> tuple[str, dict[str, Any]]:
        """(the answer text, the usage figures the answer gave)."""
        def unreadable(reason: str) -> AnswerUnreadable:
            return AnswerUnreadable(self._clean(reason), guesser=self.name, attempt=number)

        if self._format == "text":
            return body.decode(charset or "utf-8", errors="replace"), {}
        if not _is_json_type(content_type):
            opening = _one_line(body.decode(charset or "utf-8", errors="replace"),
                                _OPENING_CHARS)
            media = content_type.split(";", 1)[0].strip()
            hint = ""
            if media.lower() == "text/event-stream":
                hint = ("; answers streamed in parts are not read, so leave `stream` out of "
                        "guesser.http.sampling (or set it to false)")
            raise unreadable(f"the answer is {media}, not JSON; it begins: {opening!r}{hint}")
        try:
            data = json.loads(body)
        except (UnicodeDecodeError, json.JSONDecodeError) as e:
            opening = _one_line(body.decode("utf-8", errors="replace"), _OPENING_CHARS)
            where = (f" (line {e.lineno}, column {e.colno}: {e.msg})"
                     if isinstance(e, json.JSONDecodeError) else "")
            raise unreadable(f"the answer is not valid JSON{where}; "
                             f"{f'it begins: {opening!r}' if opening else 'it is empty'}")
        path = self._paths["text"]
        try:
            text = lookup(data, path)
        except PathMissing as e:
            raise unreadable(f"no answer text at {show_path(path)} (answer.text): {e}")
        if not isinstance(text, str):
            raise unreadable(f"{show_path(path)} holds {describe(text)}, not the answer text")
        usage: dict[str, Any] = {}
        for key in ("input_tokens", "output_tokens", "cost"):
            if key not in self._paths:
                continue
            try:
                value = lookup(data, self._paths[key])
            except PathMissing:
                continue  # an estimate stands in for missing token counts
            if isinstance(value, bool) or not isinstance(value, (int, float)) or value < 0:
                continue
            usage[key] = float(value) if key == "cost" else int(value)
        return text, usage


class _Tries:
    """The retry decisions of one round; made fresh for each ``guess`` call, so the
    guesser itself keeps nothing between calls."""

    def __init__(self, guesser: HttpGuesser, request: GuessRequest) -> None:
        self.guesser = guesser
        self.request = request
        self.retries = guesser.settings.retries
        self.why_stopped = ""

    def wait(self, state: RetryCallState) -> float:
        failure: _Transient = state.outcome.exception()  # type: ignore[union-attr,assignment]
        if failure.retry_after is not None:
            return failure.retry_after
        r = self.retries
        grown = r.first_wait * 2 ** (state.attempt_number - 1)
        return min(grown * (1 + random.uniform(0, r.jitter)), r.longest_wait)

    def stop(self, state: RetryCallState) -> bool:
        r = self.retries
        if state.attempt_number >= r.attempts:
            self.why_stopped = f"no tries left (retries.attempts is {r.attempts})"
            return True
        wait = state.upcoming_sleep
        if wait > r.longest_wait:
            self.why_stopped = (f"a wait of {wait:.3g} s is longer than retries.longest_wait "
                                f"({r.longest_wait:g} s)")
            return True
        left = self.request.seconds_left(time.monotonic())
        if wait > left:
            self.why_stopped = (f"waiting {wait:.3g} s would run past the end of the time "
                                f"budget, which has {max(left, 0):.2f} s left")
            return True
        return False

    def before_sleep(self, state: RetryCallState) -> None:
        failure: _Transient = state.outcome.exception()  # type: ignore[union-attr,assignment]
        wait = state.upcoming_sleep
        reason = self.guesser._clean(failure.error.reason)
        log.debug("try %d at %s failed: %s; next try in %.3f s", state.attempt_number,
                  self.guesser._shown_url, reason, wait)
        self.request.retrying(RetryNote(attempt=state.attempt_number, reason=reason,
                                        wait_seconds=wait, usage=failure.usage))

    def final(self, failure: _Transient) -> GuesserFailed:
        error = failure.error
        reason = f"{error.reason} on try {error.attempt}; gave up: {self.why_stopped}"
        log.debug("at %s: %s", self.guesser._shown_url, self.guesser._clean(reason))
        return with_attempt(error, self.guesser._clean(reason), error.attempt)
