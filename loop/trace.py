"""Writing the trace: every event stamped, redacted, hash-chained and, with a key, signed.

The writer owns the envelope. Each event records the SHA-256 of the canonical form
(RFC 8785) of the event before it, so an edit, a removal or a reordering anywhere
but at the very end breaks the chain where it happened. Without a key anyone who
can write the file can also rebuild the whole chain; with a key, each event also
carries an HMAC-SHA256 that cannot be rebuilt without it. Secrets are removed
before anything is hashed, so a redacted trace still verifies.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import re
import stat
from collections.abc import Callable, Iterable, Mapping
from datetime import datetime, timezone
from typing import Any, Protocol

from pydantic import ValidationError

from plansieve.critics.errors import InputError, PlansieveError, Spot
from plansieve.loop.canonical import CanonicalError, canonical
from plansieve.loop.events import EVENT_ADAPTER, GENESIS, BaseEvent

REDACTED = "[redacted]"
KEY_VARIABLE = "PLANSIEVE_TRACE_KEY"
# Shorter secrets would match inside ordinary words and blank out the trace.
MIN_SECRET_LENGTH = 4


class TraceError(PlansieveError):
    """The trace cannot be written, or a trace cannot be used as asked."""


class TraceFileError(InputError, TraceError):
    """A trace file cannot be opened, or what it holds cannot be read."""


# --- the chain --------------------------------------------------------------------------------


def event_digest(data: Mapping[str, Any]) -> str:
    """Hex SHA-256 of an event's canonical form, ``mac`` included: the next event's ``prev``."""
    return hashlib.sha256(canonical(dict(data))).hexdigest()


def hmac_sha256(key: bytes, message: bytes) -> str:
    """Hex HMAC-SHA256 (RFC 2104 with SHA-256, as RFC 4231 tests it)."""
    return hmac.new(key, message, hashlib.sha256).hexdigest()


def event_mac(key: bytes, data: Mapping[str, Any]) -> str:
    """The HMAC of an event: over its canonical form with the ``mac`` member left out."""
    return hmac_sha256(key, canonical({k: v for k, v in data.items() if k != "mac"}))


def key_from_env(variable: str = KEY_VARIABLE,
                 environ: Mapping[str, str] | None = None) -> bytes | None:
    """The HMAC key from an environment variable (UTF-8); None when unset or empty."""
    value = (os.environ if environ is None else environ).get(variable, "")
    return value.encode("utf-8") if value else None


def utc_now() -> datetime:
    return datetime.now(timezone.utc)


# --- redaction --------------------------------------------------------------------------------


class Redactor:
    """Replaces secrets and pattern matches with ``[redacted]`` in every string it is given.

    Matches are found on the original text (overlapping ones included) and merged, so
    two secrets that overlap both disappear; the marker itself is not searched again.
    """

    def __init__(self, secrets: Iterable[str] = (), patterns: Iterable[str] = ()) -> None:
        self._secrets: list[str] = []
        for number, secret in enumerate(secrets, start=1):
            if not isinstance(secret, str):
                raise TraceError(f"secret #{number} to redact is a {type(secret).__name__}, "
                                 "not a string")
            if len(secret) < MIN_SECRET_LENGTH:
                # never echo the secret itself, not even a short one
                raise TraceError(
                    f"secret #{number} to redact is {len(secret)} character(s) long; a secret "
                    f"must have at least {MIN_SECRET_LENGTH}, or it would blank out ordinary "
                    "words")
            self._secrets.append(secret)
        self._patterns: list[re.Pattern[str]] = []
        for number, pattern in enumerate(patterns, start=1):
            try:
                compiled = re.compile(pattern)
            except (re.error, TypeError) as err:
                raise TraceError(f"redaction pattern #{number} {pattern!r} is not a valid "
                                 f"regular expression: {err}") from None
            if compiled.search(""):
                raise TraceError(f"redaction pattern #{number} {pattern!r} matches the empty "
                                 "string, so it would match everywhere; make it require at "
                                 "least one character")
            self._patterns.append(compiled)

    def __bool__(self) -> bool:
        return bool(self._secrets or self._patterns)

    def text(self, s: str) -> str:
        spans: list[tuple[int, int]] = []
        for secret in self._secrets:
            i = s.find(secret)
            while i != -1:
                spans.append((i, i + len(secret)))
                i = s.find(secret, i + 1)
        for pattern in self._patterns:
            spans.extend(m.span() for m in pattern.finditer(s) if m.end() > m.start())
        if not spans:
            return s
        spans.sort()
        out, pos, start, end = [], 0, *spans[0]
        for a, b in spans[1:]:
            if a <= end:
                end = max(end, b)
                continue
            out += [s[pos:start], REDACTED]
            pos, start, end = end, a, b
        out += [s[pos:start], REDACTED, s[end:]]
        return "".join(out)

    def value(self, obj: Any) -> Any:
        """Redact every string in JSON-like data, object keys included."""
        if isinstance(obj, str):
            return self.text(obj)
        if isinstance(obj, dict):
            return {self.text(k) if isinstance(k, str) else k: self.value(v)
                    for k, v in obj.items()}
        if isinstance(obj, (list, tuple)):
            return [self.value(v) for v in obj]
        return obj


# --- sinks ------------------------------------------------------------------------------------


class TraceSink(Protocol):
    """Where stamped events go. ``line`` is the canonical JSON plus a newline."""

    def write(self, event: Any, line: bytes) -> None: ...

    def close(self) -> None: ...


def _open_failure(path: str, err: OSError) -> TraceFileError:
    if isinstance(err, FileNotFoundError):
        why = "its folder does not exist"
    elif isinstance(err, IsADirectoryError):
        why = "this is a directory"
    elif isinstance(err, PermissionError):
        why = "permission denied"
    else:
        why = err.strerror or str(err)
    return TraceFileError(Spot(path, None, None, f"cannot open the trace for writing: {why}"))


class FileSink:
    """JSON Lines on disk: one canonical event a line, flushed after each (fsync on request).

    A new trace never overwrites a file that already holds something; pass
    ``append=True`` to add a run after the ones already there.
    """

    def __init__(self, path: str | os.PathLike[str], *, fsync: bool = False,
                 append: bool = False) -> None:
        self.path = os.fspath(path)
        self._fsync = fsync
        self._failed = False
        try:
            self._file = self._open(append)
        except OSError as err:
            raise _open_failure(self.path, err) from None

    def _open(self, append: bool):
        if append:
            needs_newline = False
            try:
                with open(self.path, "rb") as f:
                    if f.seek(0, os.SEEK_END) > 0:
                        f.seek(-1, os.SEEK_END)
                        needs_newline = f.read(1) != b"\n"
            except FileNotFoundError:
                pass
            f = open(self.path, "ab")
            if needs_newline:  # a run cut off mid-line: keep its fragment on a line of its own
                f.write(b"\n")
                f.flush()
            return f
        try:
            return open(self.path, "xb")
        except FileExistsError:
            info = os.stat(self.path)
            if stat.S_ISDIR(info.st_mode):
                raise IsADirectoryError(self.path) from None
            if stat.S_ISREG(info.st_mode) and info.st_size > 0:
                raise TraceFileError(Spot(
                    self.path, None, None,
                    f"the file already holds {info.st_size} bytes (perhaps another trace) and "
                    "will not be overwritten; choose a new file, or ask to append to it")) from None
            return open(self.path, "wb")  # an empty file, a device or a pipe

    def write(self, event: Any, line: bytes) -> None:
        if self._file is None:
            raise TraceError(f"the trace file {self.path} is already closed")
        try:
            self._file.write(line)
            self._file.flush()
            if self._fsync:
                os.fsync(self._file.fileno())
        except OSError as err:
            self._failed = True
            raise TraceError(f"cannot write the trace to {self.path}: "
                             f"{err.strerror or err}") from None

    def close(self) -> None:
        f, self._file = self._file, None
        if f is not None:
            try:
                f.close()
            except OSError as err:
                if self._failed:  # the same failure, already reported by write
                    return
                raise TraceError(f"cannot finish the trace file {self.path}: "
                                 f"{err.strerror or err}") from None


class MemorySink:
    """Keeps what was written: the event dicts and the exact lines."""

    def __init__(self) -> None:
        self.events: list[dict[str, Any]] = []
        self.lines: list[bytes] = []

    def write(self, event: Any, line: bytes) -> None:
        self.lines.append(line)
        self.events.append(json.loads(line))

    def content(self) -> bytes:
        """The trace as a file would hold it."""
        return b"".join(self.lines)

    def close(self) -> None:
        pass


class CallbackSink:
    """Hands every stamped event (the pydantic model) to a function, e.g. a progress display."""

    def __init__(self, fn: Callable[[Any], None]) -> None:
        self._fn = fn

    def write(self, event: Any, line: bytes) -> None:
        self._fn(event)

    def close(self) -> None:
        pass


# --- the writer -------------------------------------------------------------------------------


class TraceWriter:
    """Stamps events with the envelope and writes them through every sink, in order.

    One writer per run. After a sink fails, the writer refuses further events: a
    trace with a silent hole in it would be worse than a run that stops.
    """

    def __init__(self, sinks: TraceSink | Iterable[TraceSink], *, run_id: str,
                 hmac_key: bytes | None = None, redact: Redactor | None = None,
                 clock: Callable[[], datetime] = utc_now) -> None:
        if not isinstance(run_id, str) or not run_id:
            raise TraceError("a trace needs a non-empty run id")
        if hmac_key is not None and not isinstance(hmac_key, (bytes, bytearray)):
            raise TraceError("the trace key must be bytes")
        if hmac_key is not None and not hmac_key:
            raise TraceError("the trace key is empty; pass None to write without a MAC")
        self._sinks: list[TraceSink] = ([sinks] if hasattr(sinks, "write") else list(sinks))
        self._redact = redact if redact else None
        self._run = self._redact.text(run_id) if self._redact else run_id
        self._key = bytes(hmac_key) if hmac_key is not None else None
        self._clock = clock
        self._seq = 0
        self._prev = GENESIS
        self._closed = False
        self._broken: str | None = None

    @property
    def run_id(self) -> str:
        return self._run

    @property
    def next_seq(self) -> int:
        return self._seq

    @property
    def last_digest(self) -> str:
        """The ``prev`` the next event will carry."""
        return self._prev

    @property
    def keyed(self) -> bool:
        return self._key is not None

    def _stamp(self) -> str:
        now = self._clock()
        if now.tzinfo is None or now.utcoffset() is None:
            raise TraceError("the trace clock gave a time without a time zone")
        return now.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")

    def emit(self, event: BaseEvent) -> Any:
        """Write one event; returns it as written (envelope filled, strings redacted)."""
        if not isinstance(event, BaseEvent):
            raise TypeError(f"emit takes a trace event, not {type(event).__name__}")
        kind = event.kind  # type: ignore[attr-defined]
        if self._closed:
            raise TraceError(f"the trace is closed; the '{kind}' event was not written")
        if self._broken:
            raise TraceError(f"the trace stopped after a failed write ({self._broken}); "
                             f"the '{kind}' event was not written")
        body = event.body()
        if self._redact:
            body = self._redact.value(body)
        data = {**body, "seq": self._seq, "at": self._stamp(), "run": self._run,
                "prev": self._prev, "mac": None}
        try:
            # Unredacted, the event is the one already validated: only the envelope is new.
            stamped = (EVENT_ADAPTER.validate_python(data) if self._redact else
                       event.model_copy(update={k: data[k] for k in ("seq", "at", "run", "prev")}))
        except ValidationError as err:
            where = ".".join(str(p) for p in err.errors()[0]["loc"][1:]) or "the event"
            raise TraceError(f"the '{kind}' event is no longer valid after redaction (at "
                             f"{where}); a redaction pattern matches a name the trace needs — "
                             "narrow it") from None
        try:
            if self._key is not None:
                data["mac"] = event_mac(self._key, data)
            line = canonical(data)
        except CanonicalError as err:
            raise TraceError(f"the '{kind}' event (#{self._seq}) cannot be written: "
                             f"{err}") from None
        if data["mac"] is not None:
            stamped = stamped.model_copy(update={"mac": data["mac"]})
        failures: list[str] = []
        for sink in self._sinks:
            try:
                sink.write(stamped, line + b"\n")
            except TraceError as err:
                failures.append(str(err))
            except Exception as err:  # a sink is outside code; report it as ours
                failures.append(f"the trace sink {type(sink).__name__} failed: "
                                f"{type(err).__name__}: {err}")
        # The event reached the sinks that did not fail; keep the chain in step with them.
        self._seq += 1
        self._prev = hashlib.sha256(line).hexdigest()
        if failures:
            self._broken = "; ".join(failures)
            raise TraceError(self._broken)
        return stamped

    def close(self) -> None:
        """Close every sink; safe to call more than once."""
        if self._closed:
            return
        self._closed = True
        failures = []
        for sink in self._sinks:
            try:
                sink.close()
            except TraceError as err:
                failures.append(str(err))
            except Exception as err:
                failures.append(f"the trace sink {type(sink).__name__} failed to close: {err}")
        if failures:
            raise TraceError("; ".join(failures))

    def __enter__(self) -> "TraceWriter":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
