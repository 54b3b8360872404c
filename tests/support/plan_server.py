"""A real HTTP/1.1 plan server on 127.0.0.1 for the end-to-end tests and the HTTP bench.

It stands in for a model server a user would point plansieve at: it listens on an
ephemeral port, keeps connections alive, and answers POSTed requests in one of the
two shapes the HTTP guesser's presets speak —

- ``chat-messages``: ``{"choices": [{"message": {"role": "assistant", "content": TEXT}}],
  "usage": {"prompt_tokens": N, "completion_tokens": M}}``;
- ``prompt-text``: ``{"text": TEXT}``.

TEXT is the plan the local heuristic guesser finds for the task it was given, or,
in the first ``wrong_rounds`` rounds, that plan spoiled on purpose (by default its
first step dropped), so the loop has to give feedback and ask again. The round is
read from the request: a ``round`` member of the body if there is one, else the
number of user turns in ``messages``, else 1.

Faults come from a schedule (:class:`Fault`, built by the functions below): a status
code with ``Retry-After`` in seconds or as an HTTP-date, a reset connection, a stall
past the client's read timeout, a truncated body, a body that is not JSON, an HTML
page, an oversize body (with or without ``Content-Length``), an answer with no plan,
an error that quotes the request's headers (key included) back.
The server checks an expected API key header (401 otherwise), can add latency to
every answer, counts the requests and the connections it opened, and records each
request's own handling time (from the whole request read to the last byte handed
to the socket), so a client can tell its own overhead from the server's.

The server runs its own event loop in a background thread, so synchronous tests
and ``asyncio.run`` callers alike can talk to it. Run as a script, it serves in a
process of its own until its standard input closes (the bench does this, so the
server does not compete with the client for one interpreter lock); a GET of
``/plan-server/stats`` then returns the counters and the records as JSON.

It is test code: h11 (the HTTP/1.1 state machine httpx is built on) parses and
frames the messages; nothing in the package imports this module.
"""

from __future__ import annotations

import argparse
import asyncio
import hmac
import json
import math
import os
import socket
import struct
import sys
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from datetime import datetime, timedelta, timezone
from email.utils import format_datetime
from typing import Any, Union

import h11

from plansieve.adapters.extract import extract_plan
from plansieve.adapters.guesser import GuessRequest
from plansieve.adapters.heuristic import HeuristicGuesser
from plansieve.critics.model import Task
from plansieve.critics.plan import Plan

SHAPES = ("chat-messages", "prompt-text")
ANSWER_PATH = "/answer"
STATS_PATH = "/plan-server/stats"
# every answer carries the server's number for the request, so a client can match
# its own timing with the server's record
NUMBER_HEADER = "x-plan-server-request"
NO_PLAN_TEXT = ("I looked at the task but I would rather not commit to a plan yet. "
                "Could you tell me more about what matters most here?")
HTML_PAGE = (b"<!DOCTYPE html>\n<html><head><title>Front door</title></head>\n"
             b"<body><h1>The planner is resting</h1><p>Please come back later.</p></body></html>\n")
NOT_JSON = b'{"choices": [{"message": {"content": "(lift carrier-7'

# --- faults -----------------------------------------------------------------------------------

RetryAfter = Union[int, float, datetime, timedelta, str, None]


@dataclass(frozen=True)
class Fault:
    """One deliberate misbehaviour, applied to one request. Build it with the functions below."""

    kind: str
    status: int = 200
    # int/float: delay-seconds; datetime: that HTTP-date; timedelta: an HTTP-date this far
    # after the moment of answering; str: sent as written (to test garbage)
    retry_after: RetryAfter = None
    seconds: float = 0.0
    size: int = 0
    chunked: bool = False


def status(code: int, retry_after: RetryAfter = None) -> Fault:
    """Answer ``code`` with a short JSON error, and ``Retry-After`` if given."""
    return Fault("status", status=code, retry_after=retry_after)


def reset() -> Fault:
    """Read the request, then drop the connection with a TCP reset and no answer."""
    return Fault("reset", status=0)


def stall(seconds: float) -> Fault:
    """Say nothing for ``seconds`` (set it past the client's read timeout), then answer."""
    return Fault("stall", seconds=seconds)


def truncated() -> Fault:
    """Announce the whole body's length, send half of it, close the connection."""
    return Fault("truncated")


def not_json() -> Fault:
    """A 200 labelled JSON whose body is not JSON."""
    return Fault("not-json")


def html_page(code: int = 200) -> Fault:
    """An HTML page (``text/html``), as a proxy or a login wall would send."""
    return Fault("html", status=code)


def oversize(size: int, chunked: bool = False) -> Fault:
    """A well-formed answer whose body is at least ``size`` bytes; ``chunked`` leaves out
    ``Content-Length`` so the client only finds out by reading."""
    return Fault("oversize", size=size, chunked=chunked)


def no_plan() -> Fault:
    """A well-formed answer whose text holds no plan, only prose."""
    return Fault("no-plan")


def echo_headers(code: int = 400) -> Fault:
    """Status ``code`` with a JSON error that opens with the key header's value and the
    request target (query included), then quotes every request header back, as a
    careless server might: a client must not repeat any of it."""
    return Fault("echo", status=code)


FaultSchedule = Union[Sequence[Union[Fault, None]], Callable[[int], Union[Fault, None]]]


def drop_first_step(plan: Plan) -> Plan:
    """The default way to spoil a plan: leave its first step out."""
    return Plan(plan.steps[1:])


def http_date(when: datetime) -> str:
    """IMF-fixdate (RFC 9110 §5.6.7), e.g. ``Sun, 06 Nov 1994 08:49:37 GMT``."""
    return format_datetime(when.astimezone(timezone.utc), usegmt=True)


def _retry_after_text(value: RetryAfter) -> str | None:
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, timedelta):
        return http_date(datetime.now(timezone.utc) + value)
    if isinstance(value, datetime):
        return http_date(value)
    return str(max(0, math.ceil(value)))


# --- records ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Served:
    """What the server did with one request to the answer path."""

    number: int  # 0-based, in arrival order
    connection: int  # 0-based number of the connection it came on
    status: int  # 0 when no status line was sent (reset)
    fault: str | None
    round: int | None
    task_id: str | None
    # own handling time: whole request read -> last byte handed to the socket; None while
    # the answer is still being made (a stall) or when it was cut off by stop()
    seconds: float | None
    request_bytes: int
    response_bytes: int


# --- the server -------------------------------------------------------------------------------


class PlanServer:
    """An HTTP/1.1 server on 127.0.0.1 that answers with plans for ``task``.

    Use it as a context manager (or ``start()``/``stop()``); ``url`` is the address
    to POST to. ``faults`` is a list (the n-th request that passed the key check
    gets the n-th entry; None or the end of the list means a healthy answer) or a
    function of that number.
    """

    def __init__(self, task: Task, *, shape: str = "chat-messages", api_key: str | None = None,
                 key_header: str = "authorization", key_prefix: str = "Bearer ",
                 wrong_rounds: int = 0, spoil: Callable[[Plan], Plan] = drop_first_step,
                 latency: float = 0.0, faults: FaultSchedule = (),
                 guesser: HeuristicGuesser | None = None, port: int = 0) -> None:
        if shape not in SHAPES:
            raise ValueError(f"shape must be one of {', '.join(SHAPES)}, not {shape!r}")
        self.task, self.shape = task, shape
        self._key = (key_prefix + api_key).encode() if api_key is not None else None
        self._key_header = key_header.lower().encode()
        self.wrong_rounds, self.spoil, self.latency = wrong_rounds, spoil, latency
        self._guesser = guesser or HeuristicGuesser()
        self._port = port
        self._faults: FaultSchedule = faults
        self._fault_base = 0
        self.plan_text = self.wrong_text = ""
        self._lock = threading.Lock()
        self._served: dict[int, Served] = {}  # by number
        self._requests = 0  # to the answer path, any outcome
        self._authorized = 0  # those that passed the key check: the fault schedule's count
        self._connections = 0
        self._open_now = 0
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None
        self._server: asyncio.AbstractServer | None = None
        self._tasks: set[asyncio.Task] = set()
        self._ready = threading.Event()
        self._error: BaseException | None = None

    # -- life cycle ------------------------------------------------------------------------

    def start(self) -> "PlanServer":
        if self._thread is not None:
            raise RuntimeError("the plan server is already started")
        self._thread = threading.Thread(target=self._run, name="plan-server", daemon=True)
        self._thread.start()
        self._ready.wait(60)
        if self._error is not None:
            raise RuntimeError(f"the plan server did not start: {self._error}") from self._error
        if not self._ready.is_set():
            raise RuntimeError("the plan server did not start within 60 s")
        return self

    def stop(self) -> None:
        loop, thread = self._loop, self._thread
        if loop is None or thread is None or not thread.is_alive():
            return
        asyncio.run_coroutine_threadsafe(self._close(), loop).result(30)
        loop.call_soon_threadsafe(loop.stop)
        thread.join(30)

    def __enter__(self) -> "PlanServer":
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()

    @property
    def port(self) -> int:
        return self._port

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self._port}"

    @property
    def url(self) -> str:
        return self.base + ANSWER_PATH

    # -- what happened ---------------------------------------------------------------------

    @property
    def requests(self) -> int:
        """Requests to the answer path so far (rejected ones included)."""
        return self._requests

    @property
    def connections(self) -> int:
        """Connections accepted so far."""
        return self._connections

    @property
    def open_connections(self) -> int:
        return self._open_now

    @property
    def served(self) -> list[Served]:
        """One record per request to the answer path, in arrival order."""
        with self._lock:
            return [self._served[n] for n in sorted(self._served)]

    def set_faults(self, faults: FaultSchedule) -> None:
        """A new schedule, counted from the next authorized request."""
        with self._lock:
            self._faults, self._fault_base = faults, self._authorized

    def stats(self) -> dict[str, Any]:
        # cpu_seconds is the whole process's: meaningful when the server runs on its own
        return {"requests": self._requests, "connections": self._connections,
                "open": self._open_now, "cpu_seconds": time.process_time(),
                "served": [asdict(s) for s in self.served]}

    # -- the event loop thread -------------------------------------------------------------

    def _run(self) -> None:
        loop = asyncio.new_event_loop()
        asyncio.set_event_loop(loop)
        self._loop = loop
        try:
            loop.run_until_complete(self._open())
        except BaseException as err:  # reported to start()
            self._error = err
            self._ready.set()
            loop.close()
            return
        self._ready.set()
        try:
            loop.run_forever()
        finally:
            loop.run_until_complete(loop.shutdown_default_executor())
            loop.close()

    async def _open(self) -> None:
        first = await self._guesser.guess(GuessRequest(self.task, 1, task_id="plan-server"))
        plan = extract_plan(first.text).plan
        if not plan.steps:
            raise RuntimeError("the heuristic guesser found no steps for this task")
        self.plan_text = plan.to_text()
        self.wrong_text = self.spoil(plan).to_text()
        self._server = await asyncio.start_server(self._connection, "127.0.0.1", self._port,
                                                  backlog=1024)
        self._port = self._server.sockets[0].getsockname()[1]

    async def _close(self) -> None:
        if self._server is not None:
            self._server.close()
        for task in list(self._tasks):
            task.cancel()
        await asyncio.gather(*self._tasks, return_exceptions=True)
        if self._server is not None:
            await self._server.wait_closed()

    # -- one connection --------------------------------------------------------------------

    async def _connection(self, reader: asyncio.StreamReader,
                          writer: asyncio.StreamWriter) -> None:
        task = asyncio.current_task()
        self._tasks.add(task)
        number = self._connections
        self._connections += 1
        self._open_now += 1
        h = h11.Connection(h11.SERVER)
        try:
            while True:
                got = await self._read_request(h, reader)
                if got is None:
                    break
                request, body, started = got
                keep = await self._answer(number, h, writer, request, body, started)
                if not keep or h.our_state is not h11.DONE or h.their_state is not h11.DONE:
                    break
                h.start_next_cycle()
        except (ConnectionError, OSError, h11.ProtocolError, asyncio.IncompleteReadError):
            pass
        except asyncio.CancelledError:
            pass
        finally:
            self._open_now -= 1
            self._tasks.discard(task)
            if not writer.transport.is_closing():
                writer.close()

    @staticmethod
    async def _read_request(h: h11.Connection, reader: asyncio.StreamReader):
        request, body = None, bytearray()
        while True:
            event = h.next_event()
            if event is h11.NEED_DATA:
                h.receive_data(await reader.read(65536))
            elif isinstance(event, h11.Request):
                request = event
            elif isinstance(event, h11.Data):
                body += event.data
            elif isinstance(event, h11.EndOfMessage):
                # the server's own time starts with the whole request in hand: a client
                # slow to send its body is the client's time
                return request, bytes(body), time.perf_counter()
            elif isinstance(event, h11.ConnectionClosed):
                return None

    async def _write(self, h: h11.Connection, writer: asyncio.StreamWriter, *events) -> int:
        data = b"".join(h.send(e) for e in events)
        writer.write(data)
        await writer.drain()
        return len(data)

    async def _respond(self, h, writer, code: int, body: bytes, content_type: bytes,
                       number: int, extra: Sequence[tuple[bytes, bytes]] = ()) -> int:
        headers = [(b"content-type", content_type), (b"content-length", str(len(body)).encode()),
                   (NUMBER_HEADER.encode(), str(number).encode()), *extra]
        return await self._write(h, writer, h11.Response(status_code=code, headers=headers),
                                 h11.Data(data=body), h11.EndOfMessage())

    async def _answer(self, conn: int, h: h11.Connection, writer: asyncio.StreamWriter,
                      request: h11.Request, body: bytes, started: float) -> bool:
        path = request.target.decode("latin-1").split("?", 1)[0]
        if request.method == b"GET" and path == STATS_PATH:
            await self._respond(h, writer, 200, json.dumps(self.stats()).encode(),
                                b"application/json", -1)
            return True
        number = self._requests
        self._requests += 1
        if request.method not in (b"POST", b"PUT") or path != ANSWER_PATH:
            sent = await self._respond(h, writer, 404, b'{"error": "nothing here"}',
                                       b"application/json", number)
            self._record(number, conn, 404, None, None, None, started, len(body), sent)
            return True
        if self.latency:
            await asyncio.sleep(self.latency)
        if self._key is not None:
            given = dict(request.headers).get(self._key_header, b"")
            if not hmac.compare_digest(given, self._key):
                sent = await self._respond(h, writer, 401,
                                           b'{"error": "a valid key is needed for this planner"}',
                                           b"application/json", number)
                self._record(number, conn, 401, None, None, None, started, len(body), sent)
                return True
        fault = self._next_fault()
        try:
            data = json.loads(body)
        except ValueError:
            sent = await self._respond(h, writer, 400, b'{"error": "the request is not JSON"}',
                                       b"application/json", number)
            self._record(number, conn, 400, None, None, None, started, len(body), sent)
            return True
        round_, task_id = _round_of(data), _task_id_of(data)
        kind = fault.kind if fault else None
        code, sent, keep = 200, 0, True
        if fault is not None and fault.kind in ("status", "html", "echo", "reset"):
            code = fault.status
        # recorded now, so a stalled request shows up before its answer is sent
        self._put(Served(number=number, connection=conn, status=code, fault=kind, round=round_,
                         task_id=task_id, seconds=None, request_bytes=len(body),
                         response_bytes=0))
        if fault is None:
            sent = await self._respond_text(h, writer, number, data, self._text_for(round_))
        elif fault.kind == "status":
            extra = []
            retry_after = _retry_after_text(fault.retry_after)
            if retry_after is not None:
                extra.append((b"retry-after", retry_after.encode("latin-1")))
            sent = await self._respond(h, writer, code,
                                       b'{"error": "the planner cannot take this just now"}',
                                       b"application/json", number, extra)
        elif fault.kind == "reset":
            keep = False
            sock = writer.get_extra_info("socket")
            if sock is not None:
                # SO_LINGER with a zero timeout makes close() send RST instead of FIN
                sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
            writer.transport.abort()
        elif fault.kind == "stall":
            await asyncio.sleep(fault.seconds)
            sent = await self._respond_text(h, writer, number, data, self._text_for(round_))
        elif fault.kind == "truncated":
            whole = self._answer_body(data, self._text_for(round_))
            head = h11.Response(status_code=200, headers=[
                (b"content-type", b"application/json"),
                (b"content-length", str(len(whole)).encode()),
                (NUMBER_HEADER.encode(), str(number).encode())])
            sent = await self._write(h, writer, head, h11.Data(data=whole[:len(whole) // 2]))
            keep = False
            writer.close()
        elif fault.kind == "not-json":
            sent = await self._respond(h, writer, 200, NOT_JSON, b"application/json", number)
        elif fault.kind == "html":
            sent = await self._respond(h, writer, code, HTML_PAGE, b"text/html; charset=utf-8",
                                       number)
        elif fault.kind == "oversize":
            filler = "Nothing to see, only filler. " * (fault.size // 29 + 1)
            whole = self._answer_body(data, self.plan_text + "\n" + filler)
            if not fault.chunked:
                sent = await self._respond(h, writer, 200, whole, b"application/json", number)
            else:
                head = h11.Response(status_code=200, headers=[
                    (b"content-type", b"application/json"),
                    (NUMBER_HEADER.encode(), str(number).encode())])
                sent = await self._write(h, writer, head)
                for at in range(0, len(whole), 16384):
                    sent += await self._write(h, writer, h11.Data(data=whole[at:at + 16384]))
                sent += await self._write(h, writer, h11.EndOfMessage())
        elif fault.kind == "echo":
            quoted = {k.decode("latin-1"): v.decode("latin-1") for k, v in request.headers}
            given = quoted.get(self._key_header.decode("latin-1"), "")
            target = request.target.decode("latin-1")
            # the credentials first, where a client quoting the start of an error sees them
            sent = await self._respond(h, writer, code, json.dumps(
                {"error": f"credentials {given!r} not accepted for {target}",
                 "headers": quoted}).encode(), b"application/json", number)
        elif fault.kind == "no-plan":
            sent = await self._respond_text(h, writer, number, data, NO_PLAN_TEXT)
        else:
            raise ValueError(f"unknown fault kind {fault.kind!r}")
        self._record(number, conn, code, kind, round_, task_id, started, len(body), sent)
        return keep

    def _next_fault(self) -> Fault | None:
        with self._lock:
            index = self._authorized - self._fault_base
            self._authorized += 1
            faults = self._faults
        if callable(faults):
            return faults(index)
        return faults[index] if index < len(faults) else None

    def _text_for(self, round_: int) -> str:
        return self.wrong_text if round_ <= self.wrong_rounds else self.plan_text

    def _answer_body(self, request: Any, text: str) -> bytes:
        if self.shape == "prompt-text":
            return json.dumps({"text": text}).encode()
        prompt_words = 0
        if isinstance(request, dict):
            for m in request.get("messages") or ():
                if isinstance(m, dict) and isinstance(m.get("content"), str):
                    prompt_words += len(m["content"].split())
            if isinstance(request.get("prompt"), str):
                prompt_words += len(request["prompt"].split())
        return json.dumps({
            "choices": [{"message": {"role": "assistant", "content": text}}],
            "usage": {"prompt_tokens": prompt_words, "completion_tokens": len(text.split())},
        }).encode()

    async def _respond_text(self, h, writer, number: int, request: Any, text: str) -> int:
        return await self._respond(h, writer, 200, self._answer_body(request, text),
                                   b"application/json", number)

    def _record(self, number, conn, code, fault, round_, task_id, started, got, sent) -> None:
        self._put(Served(number=number, connection=conn, status=code, fault=fault, round=round_,
                         task_id=task_id, seconds=time.perf_counter() - started,
                         request_bytes=got, response_bytes=sent))

    def _put(self, served: Served) -> None:
        with self._lock:
            self._served[served.number] = served


def _round_of(data: Any) -> int:
    """The round a request is for: its ``round`` member, else its user turns, else 1."""
    if not isinstance(data, dict):
        return 1
    r = data.get("round")
    if isinstance(r, int) and not isinstance(r, bool) and r >= 1:
        return r
    if isinstance(r, str) and r.isdigit() and int(r) >= 1:
        return int(r)
    messages = data.get("messages")
    if isinstance(messages, list):
        users = sum(1 for m in messages if isinstance(m, dict) and m.get("role") == "user")
        return max(1, users)
    return 1


def _task_id_of(data: Any) -> str | None:
    if isinstance(data, dict) and isinstance(data.get("task_id"), str):
        return data["task_id"]
    return None


# --- as a process of its own ------------------------------------------------------------------


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Serve plans for one task over HTTP until "
                                                 "standard input closes (test and bench use).")
    parser.add_argument("domain")
    parser.add_argument("problem")
    parser.add_argument("--shape", choices=SHAPES, default="chat-messages")
    parser.add_argument("--latency", type=float, default=0.0, help="seconds added to each answer")
    parser.add_argument("--wrong-rounds", type=int, default=0)
    parser.add_argument("--key-env", help="environment variable holding the expected key")
    args = parser.parse_args(argv)
    from plansieve.critics.pddl import load_task
    task = load_task(args.domain, args.problem)
    key = os.environ[args.key_env] if args.key_env else None
    with PlanServer(task, shape=args.shape, latency=args.latency,
                    wrong_rounds=args.wrong_rounds, api_key=key) as server:
        print(f"serving {server.url}", flush=True)
        sys.stdin.read()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
