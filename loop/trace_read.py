"""Reading a trace back, and checking that nobody changed it.

``read_trace`` returns the events and refuses a file with unreadable lines, naming
each one — except a last line cut off part-way, which is what a crash mid-write
leaves behind: the events before it are returned. ``verify_trace`` never refuses
content; it reports every problem it finds (bad lines, broken chain, wrong or
missing MACs, gaps, a run that never finished) with the line it is on.

What the chain can and cannot show: without a key, a changed, removed or moved
event is caught unless everything after it was rebuilt too — and rebuilding is
easy for anyone who can write the file. Events removed from the very end are
caught only through the missing run-finished event. With a key, every event's
MAC must match, which cannot be forged without the key.
"""

from __future__ import annotations

import hmac
import json
import os
from dataclasses import dataclass, field
from typing import Any, Literal, get_args

from pydantic import BaseModel, ConfigDict, ValidationError

from plansieve.critics.errors import Spot
from plansieve.critics.plan_text import json_kind, json_path, json_syntax_message
from plansieve.critics.verdict import Finding
from plansieve.loop.canonical import CanonicalError
from plansieve.loop.events import ENVELOPE, EVENT_ADAPTER, EVENT_KINDS, GENESIS, SCHEMA_VERSION
from plansieve.loop.trace import TraceFileError, event_digest, event_mac

ProblemKind = Literal[
    "bad-json",        # the line is not one JSON object
    "schema",          # JSON, but not a valid event
    "chain-broken",    # 'prev' does not match the event before
    "mac-mismatch",    # the MAC is wrong for this event and key
    "mac-missing",     # a key was given but the event carries no MAC
    "seq-gap",         # 'seq' is not the next number: events missing, repeated or moved
    "run-mismatch",    # the event names another run than its run-started
    "order",           # events outside a run, or a run that does not start with run-started
    "truncated-tail",  # the last line stops part-way: the writer was cut off
    "not-finished",    # a run has no run-finished event
    "empty",           # no events at all
]

# Finding codes tag a discriminated union: pydantic puts them in error paths, the JSON has
# no such level. (Event kinds do too, always first; they can equal field names, codes cannot.)
_FINDING_CODES = {cls.model_fields["code"].default for cls in get_args(get_args(Finding)[0])}
_SHOW_LINE_UP_TO = 200  # longer lines are not quoted in messages
_ERRORS_PER_LINE = 3


class TraceProblem(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")

    line: int | None  # 1-based line in the file; None for the file as a whole
    kind: ProblemKind
    message: str

    def render(self, file: str) -> str:
        where = f"{file}:{self.line}" if self.line is not None else file
        return f"{where}: {self.kind}: {self.message}"


class TraceIntegrity(BaseModel):
    """The result of checking a trace: intact when no problem was found."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    file: str
    intact: bool
    events: int  # lines that hold a valid event
    runs: list[str]  # run ids, in the order their run-started events appear
    macs_checked: bool  # a key was given and the events' MACs were compared with it
    # SHA-256 of the last event read: compare it with a digest kept elsewhere (the run's
    # outcome, a results file) to catch events removed or rewritten at the end.
    last_digest: str | None
    problems: list[TraceProblem]

    def render(self) -> str:
        head = (f"{self.file}: {'intact' if self.intact else 'NOT intact'} — {self.events} "
                f"event{'s' if self.events != 1 else ''}, "
                f"{'MACs checked' if self.macs_checked else 'MACs not checked'}")
        return "\n".join([head, *(p.render(self.file) for p in self.problems)])


@dataclass
class _Line:
    number: int
    text: str | None = None
    data: dict[str, Any] | None = None
    event: Any = None
    spots: list[Spot] = field(default_factory=list)
    problems: list[TraceProblem] = field(default_factory=list)
    tail: bool = False  # a truncated last line


# --- files ------------------------------------------------------------------------------------


def _read_bytes(path: str | os.PathLike[str]) -> tuple[str, bytes]:
    name = os.fspath(path)
    try:
        with open(name, "rb") as f:
            return name, f.read()
    except FileNotFoundError:
        why = "no such file"
    except IsADirectoryError:
        why = "this is a directory"
    except PermissionError:
        why = "permission denied"
    except OSError as err:
        why = err.strerror or str(err)
    raise TraceFileError(Spot(name, None, None, f"cannot open the trace: {why}"))


def read_trace(path: str | os.PathLike[str]) -> list[Any]:
    """The events of a trace file, in order; refuses unreadable lines (all named at once)."""
    name, raw = _read_bytes(path)
    return read_trace_bytes(raw, name)


def read_trace_bytes(raw: bytes, name: str = "<trace>") -> list[Any]:
    """``read_trace`` for bytes already in memory (``MemorySink.content()``, a download)."""
    lines = _scan(raw, name)
    spots = [s for ln in lines if not ln.tail for s in ln.spots]
    if spots:
        raise TraceFileError(spots)
    return [ln.event for ln in lines if ln.event is not None]


def verify_trace(path: str | os.PathLike[str], key: bytes | None = None) -> TraceIntegrity:
    """Check a trace file's chain (and MACs, given the key); report every problem."""
    name, raw = _read_bytes(path)
    return verify_trace_bytes(raw, name, key=key)


def verify_trace_bytes(raw: bytes, name: str = "<trace>", *,
                       key: bytes | None = None) -> TraceIntegrity:
    """``verify_trace`` for bytes already in memory."""
    lines = _scan(raw, name)
    problems = [p for ln in lines for p in ln.problems]
    problems += _check_chain(lines, key)
    problems.sort(key=lambda p: (p.line is None, p.line or 0))
    runs = [ln.data.get("run") for ln in lines
            if ln.data is not None and ln.data.get("kind") == "run-started"]
    has_mac = any(ln.data is not None and ln.data.get("mac") is not None for ln in lines)
    if not any(ln.data is not None for ln in lines) and not problems:
        problems.append(TraceProblem(line=None, kind="empty", message="the file holds no events"))
    return TraceIntegrity(
        file=name, intact=not problems, events=sum(ln.event is not None for ln in lines),
        runs=[r if isinstance(r, str) else "?" for r in runs],
        macs_checked=key is not None and has_mac, last_digest=_last_digest(lines),
        problems=problems)


def _last_digest(lines: list[_Line]) -> str | None:
    for ln in reversed(lines):
        if ln.data is not None:
            try:
                return event_digest(ln.data)
            except CanonicalError:
                return None
    return None


# --- one line at a time -----------------------------------------------------------------------


def _scan(raw: bytes, name: str) -> list[_Line]:
    chunks = raw.split(b"\n")
    last = chunks.pop()  # b"" when the file ends with a line end, as the writer leaves it
    lines = [_read_line(name, i, chunk, ended=True) for i, chunk in enumerate(chunks, start=1)]
    if last:
        lines.append(_read_line(name, len(chunks) + 1, last, ended=False))
    return lines


class _Duplicate(Exception):
    def __init__(self, key: str) -> None:
        self.key = key


def _pairs(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in pairs:
        if k in out:
            raise _Duplicate(k)
        out[k] = v
    return out


def _no_constant(word: str) -> Any:
    raise ValueError(f"{word} is not a JSON number")


_DECODER = json.JSONDecoder(object_pairs_hook=_pairs, parse_constant=_no_constant)


def _read_line(name: str, number: int, chunk: bytes, *, ended: bool) -> _Line:
    ln = _Line(number)
    if number == 1:
        chunk = chunk.removeprefix(b"\xef\xbb\xbf")  # an editor's byte-order mark is not content

    def bad(kind: str, message: str, column: int | None = None, fld: str | None = None) -> _Line:
        if not ended and kind == "bad-json":
            # The writer always ends a line; an unfinished, unreadable last line is a crash.
            ln.tail = True
            kind, message = "truncated-tail", (
                f"the last line stops part-way ({len(chunk)} bytes, no line end): the writer "
                "was cut off; the events before it can still be read")
            column = None
        ln.problems.append(TraceProblem(line=number, kind=kind,  # type: ignore[arg-type]
                                        message=f"at {fld}: {message}" if fld else message))
        shown = ln.text if ln.text is not None and len(ln.text) <= _SHOW_LINE_UP_TO else None
        ln.spots.append(Spot(name, number, column, message, shown, field=fld))
        return ln

    try:
        ln.text = chunk.decode("utf-8")
    except UnicodeDecodeError as err:
        return bad("bad-json", f"not UTF-8 text: byte 0x{chunk[err.start]:02x} cannot be decoded",
                   len(chunk[:err.start].decode("utf-8", errors="replace")) + 1)
    if not ln.text.strip():
        return bad("bad-json", "an empty line; every line of a trace holds one event")
    try:
        data = _DECODER.decode(ln.text)
    except json.JSONDecodeError as err:
        return bad("bad-json", json_syntax_message(err, ln.text), err.colno)
    except _Duplicate as dup:
        return bad("bad-json", f"the field '{dup.key}' appears twice in one object")
    except RecursionError:
        return bad("bad-json", "the JSON is nested too deeply to read")
    except ValueError as err:  # NaN/Infinity, or an integer with thousands of digits
        return bad("bad-json", f"not valid JSON: {err}")
    if not isinstance(data, dict):
        return bad("schema", f"expected one event (a JSON object) — found {json_kind(data)}")
    ln.data = data
    missing = [k for k in ("kind", *ENVELOPE) if k not in data]
    if missing:
        return bad("schema", "missing field" + ("s " if len(missing) > 1 else " ")
                   + ", ".join(f"'{k}'" for k in missing)
                   + ("" if "kind" in missing else " of the envelope every event carries"))
    version = data.get("schema_version")
    if data.get("kind") == "run-started" and isinstance(version, int) and version > SCHEMA_VERSION:
        return bad("schema", f"this run was written with trace schema version {version}; this "
                             f"plansieve reads version {SCHEMA_VERSION} — use a newer plansieve")
    try:
        ln.event = EVENT_ADAPTER.validate_python(data)
    except ValidationError as err:
        errors = err.errors()
        for e in errors[:_ERRORS_PER_LINE]:
            loc = tuple(e["loc"])
            loc = loc[1:] if loc and loc[0] in EVENT_KINDS else loc
            loc = tuple(p for p in loc if p not in _FINDING_CODES)
            bad("schema", _explain(e), fld=json_path("", loc) or None)
        if len(errors) > _ERRORS_PER_LINE:
            bad("schema", f"and {len(errors) - _ERRORS_PER_LINE} more problem(s) in this event")
    return ln


def _explain(error: dict[str, Any]) -> str:
    """One pydantic error in our words."""
    kind, loc, value = error["type"], error["loc"], error.get("input")
    name = str(loc[-1]) if loc else ""
    found = f" — found {json_kind(value)}"
    if kind == "missing":
        return f"missing field '{name}'"
    if kind == "extra_forbidden":
        return f"unknown field '{name}'"
    if kind == "union_tag_invalid":
        ctx = error.get("ctx", {})
        return (f"unknown {str(ctx.get('discriminator', 'kind')).strip(chr(39))} "
                f"{json.dumps(ctx.get('tag'))}; expected one of {ctx.get('expected_tags')}")
    if kind == "union_tag_not_found":
        return "no 'kind' or 'code' field: cannot tell which kind of record this is"
    if kind == "literal_error":
        return f"expected {error.get('ctx', {}).get('expected', 'another value')}{found}"
    if kind == "string_pattern_mismatch":
        if name == "at":
            return f"expected a UTC time like 2031-04-02T09:15:00.250000Z{found}"
        return f"expected 64 lower-case hex digits (a SHA-256){found}"
    if kind in ("int_type", "int_parsing", "int_from_float"):
        return f"expected a whole number{found}"
    if kind in ("float_type", "float_parsing", "finite_number"):
        return f"expected a finite number{found}"
    if kind in ("string_type", "string_sub_type"):
        return f"expected a string{found}"
    if kind in ("bool_type", "bool_parsing"):
        return f"expected true or false{found}"
    if kind in ("list_type", "tuple_type"):
        return f"expected a list{found}"
    if kind in ("dict_type", "model_type", "model_attributes_type"):
        return f"expected an object{found}"
    if kind in ("greater_than_equal", "greater_than"):
        bound = error.get("ctx", {}).get("ge", error.get("ctx", {}).get("gt"))
        return f"must be at least {bound}{found}"
    if kind == "string_too_short":
        return "must not be empty"
    if kind == "value_error":
        return str(error.get("ctx", {}).get("error", "this value is not allowed"))
    return f"this value is not allowed here{found}"


# --- across lines -----------------------------------------------------------------------------


def _check_chain(lines: list[_Line], key: bytes | None) -> list[TraceProblem]:
    problems: list[TraceProblem] = []

    def report(line: int | None, kind: Any, message: str) -> None:
        problems.append(TraceProblem(line=line, kind=kind, message=message))

    inside = False      # between a run-started and its run-finished
    seen_event = False
    run: Any = None
    run_line = 0
    last_line = 0
    expected_seq = 0
    expected_prev: str | None = GENESIS  # None: unknown, after a line that could not be read
    unsigned: list[int] = []
    mismatched: list[int] = []
    signed = 0
    for ln in lines:
        if ln.data is None:
            if not ln.tail:
                expected_seq += 1  # the unreadable line took a place in the sequence
            expected_prev = None
            continue
        d, n = ln.data, ln.number
        kind = d.get("kind")
        if kind == "run-started":
            if inside:
                report(last_line, "not-finished",
                       f"the run started on line {run_line} has no run-finished event before "
                       f"the next run starts on line {n}")
            inside, run, run_line = True, d.get("run"), n
            expected_seq, expected_prev = 0, GENESIS
        elif not inside:
            if not seen_event:
                report(n, "order", "the trace does not begin with a run-started event: its "
                                   "first lines are missing")
            else:
                report(n, "order", "an event after the run finished (run-finished on line "
                                   f"{last_line})")
            inside, run, run_line = True, d.get("run"), n
        seen_event = True
        seq = d.get("seq")
        if isinstance(seq, int) and not isinstance(seq, bool) and seq != expected_seq:
            report(n, "seq-gap", f"expected event #{expected_seq} of the run here, found #{seq}: "
                                 "events are missing, repeated or out of order")
            expected_seq = seq
        expected_seq += 1
        if expected_prev is not None and d.get("prev") != expected_prev:
            report(n, "chain-broken",
                   ("'prev' should be 64 zeros at the start of a run" if expected_prev == GENESIS
                    else f"'prev' does not match the event on line {last_line}")
                   + ": an event before this one was changed, removed or moved")
        if d.get("run") != run:
            report(n, "run-mismatch", f"the event belongs to run {json_kind(d.get('run'))}, "
                                      f"but the run started on line {run_line} is {json_kind(run)}")
        if key is not None:
            mac = d.get("mac")
            if mac is None:
                unsigned.append(n)
            else:
                signed += 1
                try:
                    ok = isinstance(mac, str) and hmac.compare_digest(event_mac(key, d), mac)
                except (CanonicalError, TypeError):
                    ok = False
                if not ok:
                    mismatched.append(n)
        try:
            expected_prev = event_digest(d)
        except CanonicalError as err:
            report(n, "schema", f"the event has no canonical form: {err}")
            expected_prev = None
        last_line = n
        if kind == "run-finished":
            inside = False
    if inside:
        tail = lines[-1].tail if lines else False
        report(last_line, "not-finished",
               f"the run started on line {run_line} has no run-finished event: it "
               + ("crashed mid-write" if tail
                  else "crashed, is still running, or its end was cut off"))
    if key is not None:
        if unsigned and not signed:
            report(unsigned[0], "mac-missing", "no event carries a MAC, though a key was given: "
                                               "the trace was written without a key")
        else:
            for n in unsigned:
                report(n, "mac-missing", "the event carries no MAC, though the others do")
        if mismatched and len(mismatched) == signed and signed > 1:
            report(mismatched[0], "mac-mismatch",
                   f"no MAC matches (all {signed} events): the key is not the one the trace was "
                   "written with, or every event was rewritten")
        else:
            for n in mismatched:
                report(n, "mac-mismatch", "the MAC does not match: the event was changed after "
                                          "it was written")
    return problems
