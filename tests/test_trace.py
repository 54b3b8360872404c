"""The trace: canonical lines, hash chain, HMAC, redaction, sinks, crash tolerance, tampering.

The recorded run (tests/trace_scenario.py) is a scenario of our own.
"""

from __future__ import annotations

import hashlib
import hmac
import json
from datetime import datetime

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from plansieve.adapters.guesser import Usage
from plansieve.critics.errors import InputError
from plansieve.critics.verdict import GoalUnmet, PreconditionFalse, Verdict
from plansieve.loop.canonical import canonical
from plansieve.loop.events import (
    GENESIS, FeedbackGiven, GuessAsked, GuessFailed, GuessReceived, PlanRead, RunFinished,
    Totals, UnreadLine, VerdictGiven,
)
from plansieve.loop.trace import (
    REDACTED, CallbackSink, FileSink, MemorySink, Redactor, TraceError, TraceFileError,
    TraceWriter, event_mac, hmac_sha256, key_from_env,
)
from plansieve.loop.trace_read import (
    read_trace, read_trace_bytes, verify_trace, verify_trace_bytes,
)
from trace_scenario import KEY, run_events, ticking, write_run

def lines_of(raw: bytes) -> list[bytes]:
    assert raw.endswith(b"\n")
    return raw[:-1].split(b"\n")


def joined(lines: list[bytes]) -> bytes:
    return b"".join(line + b"\n" for line in lines)


def found(raw: bytes, key: bytes | None = None) -> list[tuple[int | None, str]]:
    return [(p.line, p.kind) for p in verify_trace_bytes(raw, key=key).problems]


def rechain(lines: list[bytes], start: int) -> list[bytes]:
    """What someone without the key can do: recompute every 'prev' from ``start`` on."""
    out = list(lines)
    for i in range(max(start, 1), len(out)):
        data = json.loads(out[i])
        data["prev"] = hashlib.sha256(out[i - 1]).hexdigest()
        out[i] = canonical(data)
    return out


@pytest.fixture
def trace_bytes():
    sink = MemorySink()
    writer = write_run(sink, key=KEY)
    return sink.content(), writer


# --- what is written --------------------------------------------------------------------------


def test_lines_are_canonical_chained_and_signed(tmp_path):
    path = tmp_path / "crossing.trace.jsonl"
    writer = write_run(FileSink(path), key=KEY)
    lines = lines_of(path.read_bytes())
    assert len(lines) == len(run_events()) == 13
    prev = GENESIS
    for seq, line in enumerate(lines):
        data = json.loads(line)
        assert line == canonical(data)  # each line is exactly the bytes that are hashed
        assert (data["seq"], data["run"], data["prev"]) == (seq, "crossing-7", prev)
        assert data["at"].startswith("2031-04-02T09:15:00.") and data["at"].endswith("Z")
        # Source: RFC 2104 HMAC with SHA-256, computed here with Python's hmac module
        unsigned = canonical({k: v for k, v in data.items() if k != "mac"})
        assert data["mac"] == hmac.new(KEY, unsigned, hashlib.sha256).hexdigest()
        prev = hashlib.sha256(line).hexdigest()
    assert writer.last_digest == prev and writer.next_seq == 13


def test_without_a_key_there_is_no_mac():
    sink = MemorySink()
    write_run(sink)
    assert all(e["mac"] is None for e in sink.events)
    integrity = verify_trace_bytes(sink.content())
    assert integrity.intact and not integrity.macs_checked


# Source: RFC 4231, section 4.2 and 4.3 (test cases 1 and 2, HMAC-SHA-256); values from memory.
def test_hmac_helper_matches_rfc4231():
    assert hmac_sha256(b"\x0b" * 20, b"Hi There") == (
        "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7")
    assert hmac_sha256(b"Jefe", b"what do ya want for nothing?") == (
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843")


def test_event_mac_covers_the_canonical_form_without_the_mac_member():
    data = {"mac": "ff" * 32, "seq": 1, "kind": "x", "at": "t"}
    assert event_mac(b"Jefe", data) == hmac_sha256(b"Jefe", b'{"at":"t","kind":"x","seq":1}')


def test_a_verified_intact_trace(trace_bytes):
    raw, writer = trace_bytes
    integrity = verify_trace_bytes(raw, key=KEY)
    assert integrity.intact and integrity.macs_checked, integrity.render()
    assert (integrity.events, integrity.runs) == (13, ["crossing-7"])
    assert integrity.last_digest == writer.last_digest
    assert read_trace_bytes(raw)[4].verdict.findings[0].code == "goal-unmet"


def test_the_key_comes_from_the_environment():
    assert key_from_env(environ={}) is None
    assert key_from_env(environ={"PLANSIEVE_TRACE_KEY": ""}) is None
    assert key_from_env(environ={"PLANSIEVE_TRACE_KEY": "m\u00e4rz"}) == "m\u00e4rz".encode()
    both = {"FERRY_KEY": "k1", "PLANSIEVE_TRACE_KEY": "x"}
    assert key_from_env("FERRY_KEY", environ=both) == b"k1"
    with pytest.raises(TraceError, match="empty"):
        TraceWriter(MemorySink(), run_id="r", hmac_key=b"")


# --- tampering --------------------------------------------------------------------------------


def test_one_changed_character_is_found(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    lines[2] = lines[2].replace(b"marrow-isle", b"marrow-islf", 1)  # event #2, line 3
    assert found(joined(lines)) == [(4, "chain-broken")]
    assert found(joined(lines), KEY) == [(3, "mac-mismatch"), (4, "chain-broken")]


def test_a_deleted_line_is_found(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    del lines[4]
    assert found(joined(lines)) == [(5, "seq-gap"), (5, "chain-broken")]


def test_swapped_lines_are_found(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    lines[3], lines[4] = lines[4], lines[3]
    problems = found(joined(lines))
    assert {(4, "seq-gap"), (5, "seq-gap"), (4, "chain-broken"), (5, "chain-broken"),
            (6, "chain-broken")} <= set(problems)
    assert all(line in (4, 5, 6) for line, _ in problems)


def test_a_repeated_line_is_found(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    lines.insert(6, lines[5])
    assert (7, "seq-gap") in found(joined(lines)) and (7, "chain-broken") in found(joined(lines))


def test_hiding_an_edit_by_fixing_the_next_prev_only_moves_the_break(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    lines[2] = lines[2].replace(b"marrow-isle", b"marrow-islf", 1)
    data = json.loads(lines[3])
    data["prev"] = hashlib.sha256(lines[2]).hexdigest()
    lines[3] = canonical(data)
    assert found(joined(lines)) == [(5, "chain-broken")]


def test_rewriting_the_whole_chain_is_caught_only_with_the_key(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    lines[2] = lines[2].replace(b"marrow-isle", b"marrow-islf", 1)
    forged = joined(rechain(lines, 3))
    # The limit, documented: without a key, a rebuilt chain is indistinguishable from the
    # real one. Only a MAC, or a digest of the last event kept elsewhere, shows it.
    assert verify_trace_bytes(forged).intact
    problems = found(forged, KEY)
    assert (3, "mac-mismatch") in problems
    assert {kind for _, kind in problems} == {"mac-mismatch"}
    # re-signing with a key of one's own does not help either
    resigned = []
    for line in rechain(lines, 1):
        data = json.loads(line)
        data["mac"] = event_mac(b"not-the-office-key", data)
        resigned.append(canonical(data))
    problems = verify_trace_bytes(joined(rechain(resigned, 1)), key=KEY).problems
    assert [(p.line, p.kind) for p in problems] == [(1, "mac-mismatch")]
    assert "no MAC matches" in problems[0].message


def test_an_edit_of_the_last_event_needs_the_key_or_an_anchor(trace_bytes):
    raw, writer = trace_bytes
    lines = lines_of(raw)
    lines[-1] = lines[-1].replace(b"accepted in round 2", b"accepted in round 1")
    edited = joined(lines)
    integrity = verify_trace_bytes(edited)
    assert integrity.intact  # the limit: nothing comes after the last event to notice
    assert integrity.last_digest != writer.last_digest  # ...unless its digest was kept
    assert found(edited, KEY) == [(13, "mac-mismatch")]


def test_events_cut_from_the_end_leave_the_run_unfinished(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)[:-2]
    assert found(joined(lines)) == [(11, "not-finished")]


def test_a_removed_mac_is_reported(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)
    data = json.loads(lines[5])
    data["mac"] = None
    lines[5] = canonical(data)
    assert found(joined(lines), KEY) == [(6, "mac-missing"), (7, "chain-broken")]
    unsigned = MemorySink()
    write_run(unsigned)
    problems = verify_trace_bytes(unsigned.content(), key=KEY).problems
    assert [(p.line, p.kind) for p in problems] == [(1, "mac-missing")]
    assert "written without a key" in problems[0].message


def test_a_missing_beginning_is_found(trace_bytes):
    raw, _ = trace_bytes
    lines = lines_of(raw)[1:]
    assert found(joined(lines)) == [(1, "order"), (1, "seq-gap"), (1, "chain-broken")]


# --- redaction --------------------------------------------------------------------------------


SECRET = "tok-QUILLON-7731-harbour"


def test_secrets_never_reach_a_sink(tmp_path):
    path = tmp_path / "redacted.trace.jsonl"
    memory, seen = MemorySink(), []
    redact = Redactor([SECRET], patterns=[r"sk-[A-Za-z0-9]{12,}"])
    events = run_events(SECRET)
    events[1] = GuessAsked(round=1, feedback="use sk-abcdefGHIJKL0123", history=0)
    write_run([FileSink(path), memory, CallbackSink(seen.append)], key=KEY, redact=redact,
              events=events, run_id=f"crossing {SECRET}")
    for raw in (path.read_bytes(), memory.content(),
                "".join(e.model_dump_json() for e in seen).encode()):
        assert SECRET.encode() not in raw and b"sk-abcdef" not in raw
        assert raw.count(REDACTED.encode()) >= 14
    text = path.read_text()
    for where in ('"problem":"morning-crossings [redacted]"', '"header [redacted]":"v"',
                  '"effect":"(docked ferry2 marrow-isle) [redacted]"',
                  '"feedback":"use [redacted]"',
                  '"reason":"timed out [redacted]"', '"run":"crossing [redacted]"'):
        assert where in text, where
    # hashed after redaction, so the redacted trace verifies
    assert verify_trace(path, key=KEY).intact
    assert events[2].text.endswith(SECRET)  # the caller's event is left as it was


def test_overlapping_secrets_both_vanish():
    r = Redactor(["abcdef", "defghi"])
    assert r.text("xxabcdefghiyy abcdef") == f"xx{REDACTED}yy {REDACTED}"
    assert r.value({"k abcdef": ["defghi", 3, None]}) == {f"k {REDACTED}": [REDACTED, 3, None]}


def test_redactor_refuses_what_would_blank_everything():
    with pytest.raises(TraceError, match="3 character") as err:
        Redactor(["abc"])
    assert "abc" not in str(err.value)  # never echo a secret
    with pytest.raises(TraceError, match="matches the empty string"):
        Redactor(patterns=["[0-9]*"])
    with pytest.raises(TraceError, match="not a valid regular expression"):
        Redactor(patterns=["(unclosed"])


def test_a_pattern_that_eats_a_field_name_is_refused_and_nothing_is_written():
    sink = MemorySink()
    writer = TraceWriter(sink, run_id="r", redact=Redactor(patterns=["history"]))
    with pytest.raises(TraceError, match="narrow it"):
        writer.emit(GuessAsked(round=1, feedback="", history=0))
    assert sink.lines == [] and writer.next_seq == 0


# --- sinks and the writer ---------------------------------------------------------------------


def test_file_and_memory_sinks_hold_the_same_bytes(tmp_path):
    path = tmp_path / "t.jsonl"
    memory = MemorySink()
    write_run([FileSink(path, fsync=True), memory], key=KEY)
    assert path.read_bytes() == memory.content()
    assert memory.events[0]["kind"] == "run-started"


def test_an_existing_trace_is_not_overwritten(tmp_path):
    path = tmp_path / "old.trace.jsonl"
    path.write_text("yesterday's run\n")
    with pytest.raises(TraceFileError) as err:
        FileSink(path)
    assert isinstance(err.value, InputError) and err.value.first.file == str(path)
    assert "will not be overwritten" in str(err.value)
    assert path.read_text() == "yesterday's run\n"
    empty = tmp_path / "empty.jsonl"
    empty.write_bytes(b"")
    FileSink(empty).close()  # an empty file holds nothing to lose


def test_appending_a_second_run_on_purpose(tmp_path):
    path = tmp_path / "both.jsonl"
    write_run(FileSink(path), key=KEY, run_id="crossing-7")
    write_run(FileSink(path, append=True), key=KEY, run_id="crossing-8")
    integrity = verify_trace(path, key=KEY)
    assert integrity.intact, integrity.render()
    assert integrity.runs == ["crossing-7", "crossing-8"] and integrity.events == 26


@pytest.mark.parametrize("where, says", [("missing/dir/t.jsonl", "folder does not exist"),
                                         (".", "this is a directory")])
def test_a_trace_that_cannot_be_opened(tmp_path, where, says):
    with pytest.raises(TraceFileError, match=says) as err:
        FileSink(tmp_path / where)
    assert str(tmp_path) in err.value.first.file


def test_a_failing_sink_is_our_error_and_stops_the_trace():
    memory = MemorySink()
    writer = TraceWriter([FileSink("/dev/full"), memory], run_id="r", clock=ticking())
    with pytest.raises(TraceError, match="/dev/full") as err:
        writer.emit(GuessAsked(round=1, feedback="", history=0))
    assert not isinstance(err.value, OSError)
    assert len(memory.lines) == 1  # the other sinks still got the event
    with pytest.raises(TraceError, match="stopped after a failed write"):
        writer.emit(GuessAsked(round=2, feedback="", history=1))
    writer.close()


def test_a_failing_callback_is_reported_as_ours():
    def explode(event):
        raise ValueError("display gone")
    memory = MemorySink()
    writer = TraceWriter([CallbackSink(explode), memory], run_id="r")
    with pytest.raises(TraceError, match="display gone"):
        writer.emit(GuessAsked(round=1, feedback="", history=0))
    assert len(memory.lines) == 1


def test_close_is_idempotent_and_final():
    writer = TraceWriter(MemorySink(), run_id="r")
    writer.close()
    writer.close()
    with pytest.raises(TraceError, match="closed"):
        writer.emit(GuessAsked(round=1, feedback="", history=0))


def test_an_event_without_a_json_form_is_refused_before_anything_is_written():
    sink = MemorySink()
    writer = TraceWriter(sink, run_id="r", clock=ticking())
    bad = GuessReceived(round=1, text="x", usage=Usage(cost=float("nan")))
    with pytest.raises(TraceError, match=r"usage\.cost"):
        writer.emit(bad)
    assert sink.lines == []
    for event in run_events():  # the writer carries on with no hole in the chain
        writer.emit(event)
    assert verify_trace_bytes(sink.content()).intact


def test_the_clock_must_know_its_time_zone():
    writer = TraceWriter(MemorySink(), run_id="r", clock=lambda: datetime(2031, 1, 1))
    with pytest.raises(TraceError, match="time zone"):
        writer.emit(GuessAsked(round=1, feedback="", history=0))


# --- reading back, crashes and bad input ------------------------------------------------------


def test_a_crash_mid_write_keeps_everything_before_it(tmp_path):
    path = tmp_path / "crash.jsonl"
    write_run(FileSink(path))
    raw = path.read_bytes()
    # cut inside the last line's two-byte "ñ", as a kill between write calls can leave it
    cut = raw.rindex("\u00f1".encode()) + 1
    path.write_bytes(raw[:cut])
    events = read_trace(path)
    assert len(events) == 12 and events[-1].kind == "verdict"
    integrity = verify_trace(path)
    assert [(p.line, p.kind) for p in integrity.problems] == [(12, "not-finished"),
                                                             (13, "truncated-tail")]
    assert integrity.events == 12
    # a new run appended afterwards does not glue itself onto the fragment
    write_run(FileSink(path, append=True), run_id="crossing-8")
    after = verify_trace(path)
    assert [(p.line, p.kind) for p in after.problems] == [(12, "not-finished"), (13, "bad-json")]
    assert after.runs == ["crossing-7", "crossing-8"] and after.events == 25


def test_garbage_lines_are_named_by_read_trace_and_reported_by_verify(tmp_path):
    sink = MemorySink()
    write_run(sink)
    lines = lines_of(sink.content())
    lines[3] = b'{"kind": "plan-read", "kind": "verdict"}'
    lines[6] = b"\xff\xfe not text"
    lines[8] = lines[8][:-1]  # an unfinished object in the middle is not a crash
    path = tmp_path / "garbled.jsonl"
    path.write_bytes(joined(lines))
    with pytest.raises(TraceFileError) as err:
        read_trace(path)
    spots = err.value.spots
    assert [s.line for s in spots] == [4, 7, 9]
    assert "'kind' appears twice" in spots[0].message
    assert "not UTF-8" in spots[1].message and spots[1].column == 1
    assert spots[2].column == len(lines[8]) + 1
    assert f"{path}:9:" in str(err.value)
    kinds = found(joined(lines))
    assert {(4, "bad-json"), (7, "bad-json"), (9, "bad-json")} <= set(kinds)


def test_schema_problems_name_the_field():
    sink = MemorySink()
    write_run(sink)
    lines = lines_of(sink.content())
    data = json.loads(lines[4])
    data["verdict"]["findings"][0]["condition"] = 7
    data["round"] = 0
    lines[4] = canonical(data)
    with pytest.raises(TraceFileError) as err:
        read_trace_bytes(joined(lines), "t.jsonl")
    fields = {s.field for s in err.value.spots}
    assert fields == {"round", "verdict.findings[0].condition"}
    assert (5, "schema") in found(joined(lines))


def test_unreadable_inputs_are_our_errors(tmp_path):
    with pytest.raises(TraceFileError, match="no such file"):
        read_trace(tmp_path / "absent.jsonl")
    with pytest.raises(TraceFileError, match="this is a directory"):
        verify_trace(tmp_path)
    for raw, kind in [(b"", "empty"), (b"NaN\n", "bad-json"), (b"[1, 2]\n", "schema"),
                      (b'{"kind": "ferry-log", "seq": 0}\n', "schema"), (b"\n", "bad-json")]:
        assert kind in {k for _, k in found(raw)}, raw


def test_a_newer_schema_version_is_named():
    sink = MemorySink()
    write_run(sink)
    lines = lines_of(sink.content())
    data = json.loads(lines[0])
    data["schema_version"] = 2
    lines[0] = canonical(data)
    problems = verify_trace_bytes(joined(lines)).problems
    assert problems[0].kind == "schema" and "schema version 2" in problems[0].message


# --- any run round-trips ----------------------------------------------------------------------

_text = st.text(max_size=24)
_finite = st.floats(allow_nan=False, allow_infinity=False)
_round = st.integers(1, 40)
_count = st.integers(0, 10 ** 9)
_usage = st.builds(Usage, input_tokens=_count, output_tokens=_count, cost=_finite, seconds=_finite)
_scalar = st.one_of(st.none(), st.booleans(), st.integers(-2 ** 53, 2 ** 53), _finite, _text)
_settings = st.dictionaries(_text, _scalar, max_size=3)
_finding = st.one_of(
    st.builds(GoalUnmet, message=_text, condition=_text, left_value=st.none() | _finite,
              right_value=st.none() | _finite),
    st.builds(PreconditionFalse, message=_text, action=_text, condition=_text,
              step=st.none() | st.integers(1, 99), step_text=st.none() | _text))
_verdict = st.builds(Verdict, critic=_text, version=_text, sound=st.booleans(),
                     passed=st.booleans(), findings=st.lists(_finding, max_size=2),
                     steps_checked=st.integers(0, 99), seconds=_finite)
_middle = st.one_of(
    st.builds(GuessAsked, round=_round, feedback=_text, history=st.integers(0, 40),
              settings=_settings),
    st.builds(GuessReceived, round=_round, text=_text, usage=_usage, prompt=st.none() | _text),
    st.builds(GuessFailed, round=_round, attempt=st.integers(1, 9), reason=_text,
              retry=st.booleans(), wait_seconds=st.none() | st.floats(0, 1e6)),
    st.builds(PlanRead, round=_round, steps=st.lists(_text, max_size=4),
              unread=st.lists(st.builds(UnreadLine, line=st.integers(1, 99), text=_text,
                                        reason=_text), max_size=2)),
    _verdict.map(lambda v: VerdictGiven(round=1, verdict=v,
                                        role="sound" if v.sound else "advisory")),
    st.builds(FeedbackGiven, round=_round, level=_text, text=_text,
              findings=st.lists(_finding, max_size=2)),
)
_end = st.builds(lambda stop, plan, totals: RunFinished(
    verified=stop == "verified", stop=stop, rounds=3, totals=totals,
    plan=plan if stop == "verified" else None),
    st.sampled_from(["verified", "rounds", "cost", "guesser-failed"]), _text,
    st.builds(Totals, guesser_calls=st.integers(0, 99), cost=_finite, seconds=_finite))


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(middle=st.lists(_middle, max_size=8), end=_end,
       key=st.none() | st.binary(min_size=1, max_size=48))
def test_any_run_round_trips_write_read_verify(middle, end, key):
    sink = MemorySink()
    writer = TraceWriter(sink, run_id="crossing-x", hmac_key=key)
    written = [writer.emit(e) for e in [run_events()[0], *middle, end]]
    raw = sink.content()
    back = read_trace_bytes(raw)
    assert [type(e) for e in back] == [type(e) for e in written]
    # JSON numbers are doubles: compare what matters, the canonical bytes
    assert [canonical(e.model_dump(mode="json")) for e in back] == lines_of(raw)
    integrity = verify_trace_bytes(raw, key=key)
    assert integrity.intact, integrity.render()
    assert integrity.events == len(written) and integrity.last_digest == writer.last_digest
    assert integrity.macs_checked == (key is not None)
