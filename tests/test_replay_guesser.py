"""The replay guesser answers each round exactly as the recorded run's guesser did."""

from __future__ import annotations

import asyncio

import pytest

from plansieve.adapters.guesser import Guesser, GuesserFailed, GuessRequest, Usage
from plansieve.adapters.replay import ReplayGuesser
from plansieve.loop.events import GuessFailed, GuessReceived, RunFinished, Totals
from plansieve.loop.trace import FileSink, MemorySink, TraceError, TraceWriter
from trace_scenario import PLAN, run_events, write_run


def ask(guesser, round_: int):
    # The replay guesser reads nothing but the round, so no task is needed here.
    request = GuessRequest(task=None, round=round_)  # type: ignore[arg-type]
    return asyncio.run(guesser.guess(request))


def test_replays_text_and_usage_round_by_round(tmp_path):
    path = tmp_path / "crossing.trace.jsonl"
    write_run(FileSink(path))
    replay = ReplayGuesser.from_trace(path)
    assert isinstance(replay, Guesser) and replay.name == "replay"
    first, second = ask(replay, 1), ask(replay, 2)
    assert first.text.startswith("(board ferry2 quillon)") and first.prompt == "Plan the crossing."
    assert first.usage == Usage(input_tokens=410, output_tokens=38, cost=0.0021, seconds=1.25)
    assert second.text == PLAN and second.usage.output_tokens == 51
    assert replay.describe() == {"source": str(path), "run": "crossing-7", "rounds": 2}
    assert replay.task is not None and replay.task.task_id == "fl-7"
    with pytest.raises(GuesserFailed, match="no answer for round 3") as err:
        ask(replay, 3)
    assert err.value.guesser == "replay" and "rounds answered: 1, 2" in str(err.value)


def test_replays_from_the_dicts_a_memory_sink_keeps():
    sink = MemorySink()
    write_run(sink)
    assert ask(ReplayGuesser.from_events(sink.events), 2).text == PLAN


def test_a_recorded_give_up_fails_again_with_its_reason():
    events = run_events()[:7] + [
        GuessFailed(round=2, attempt=1, reason="server busy", retry=True, wait_seconds=1.0),
        GuessFailed(round=2, attempt=2, reason="server busy twice", retry=False),
        RunFinished(verified=False, stop="guesser-failed", detail="server busy twice", rounds=2,
                    totals=Totals(guesser_calls=2)),
    ]
    sink = MemorySink()
    write_run(sink, events=events)
    replay = ReplayGuesser.from_events(sink.events)
    assert ask(replay, 1).usage.input_tokens == 410
    with pytest.raises(GuesserFailed) as err:
        ask(replay, 2)
    assert err.value.reason == "server busy twice"


def test_a_crashed_trace_still_replays_what_it_holds(tmp_path):
    path = tmp_path / "crash.jsonl"
    write_run(FileSink(path))
    raw = path.read_bytes()
    path.write_bytes(raw[:raw.rindex(b'"kind":"guess-received"') + 40])  # cut in round 2's answer
    replay = ReplayGuesser.from_trace(path)
    assert ask(replay, 1).text.startswith("(board")
    with pytest.raises(GuesserFailed, match="round 2"):
        ask(replay, 2)


def test_a_file_with_several_runs_needs_a_choice(tmp_path):
    path = tmp_path / "two.jsonl"
    write_run(FileSink(path), run_id="crossing-7")
    events = run_events()
    events[8] = GuessReceived(round=2, text="(dock ferry9 quillon)")
    write_run(FileSink(path, append=True), run_id="crossing-8", events=events)
    with pytest.raises(TraceError, match="2 runs \\(crossing-7, crossing-8\\)"):
        ReplayGuesser.from_trace(path)
    assert ask(ReplayGuesser.from_trace(path, run="crossing-8"), 2).text == "(dock ferry9 quillon)"
    with pytest.raises(TraceError, match="no run 'crossing-9'"):
        ReplayGuesser.from_trace(path, run="crossing-9")


def test_inconsistent_traces_are_refused():
    events = run_events()
    events.insert(3, GuessReceived(round=1, text="(board ferry2 quillon)"))
    sink = MemorySink()
    write_run(sink, events=events)
    with pytest.raises(TraceError, match="two answers for round 1"):
        ReplayGuesser.from_events(sink.events)
    with pytest.raises(TraceError, match="no events"):
        ReplayGuesser.from_events([])
    with pytest.raises(TraceError, match="event #0 is not a valid trace event"):
        ReplayGuesser.from_events([{"kind": "guess-received", "round": 1}])


def test_replay_through_a_writer_records_the_same_answers():
    """Replaying into a new trace gives the same guess-received texts (the auditor's check)."""
    original = MemorySink()
    write_run(original)
    replay = ReplayGuesser.from_events(original.events)
    again = MemorySink()
    writer = TraceWriter(again, run_id="audit-1")
    for r in (1, 2):
        answer = ask(replay, r)
        writer.emit(GuessReceived(round=r, text=answer.text, usage=answer.usage,
                                  prompt=answer.prompt))
    recorded = [(e["round"], e["text"], e["usage"]) for e in original.events
                if e["kind"] == "guess-received"]
    assert [(e["round"], e["text"], e["usage"]) for e in again.events] == recorded
