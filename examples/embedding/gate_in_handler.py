"""Embedding the gate in an async request handler, with nothing but the standard library.

A small HTTP service of our own invention: a dispatcher at the Port of Veyrun posts
"move these containers" requests; the service asks a guesser for a plan, lets the
critics verify it, and answers with either the verified plan or a refusal with its
reasons. The guesser here is the built-in local one, so the example runs offline.

    python examples/embedding/gate_in_handler.py          # serves on 127.0.0.1:8765
    python examples/embedding/gate_in_handler.py --once   # one request in-process, then exits

Caution: a verified plan is only as safe as the model it was checked against. Keep a
person and the site's own interlocks between a plan and the machines that carry it out.
"""

from __future__ import annotations

import asyncio
import json
import sys
from pathlib import Path

import plansieve
from plansieve.adapters.heuristic import HeuristicGuesser
from plansieve.adapters.mistakes import MistakeRates

HERE = Path(__file__).resolve().parent.parent / "harbour"
TASK = plansieve.load_task(HERE / "domain.pddl", HERE / "problem.pddl")
# One guesser for every request: it keeps no state between calls.
GUESSER = HeuristicGuesser(seed=3, mistakes=MistakeRates(drop=0.1, swap=0.1, uptake=0.8))


async def plan_request(body: dict) -> tuple[int, dict]:
    """The handler: a verified plan (200) or a refusal with reasons (422)."""
    rounds = int(body.get("rounds", 4))
    outcome = await plansieve.sieve(
        TASK, GUESSER, budget=plansieve.at_most_rounds(rounds) | plansieve.at_most_seconds(5),
        task_id=str(body.get("request_id", "request")))
    if outcome.verified:
        return 200, {"verified": True, "plan": outcome.plan_text.splitlines(),
                     "rounds": outcome.rounds}
    last = outcome.summaries[-1].feedback if outcome.summaries else None
    return 422, {"verified": False, "reason": outcome.detail, "last_feedback": last}


async def _serve_one(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
    head = await reader.readuntil(b"\r\n\r\n")
    length = 0
    for line in head.decode("latin-1").split("\r\n"):
        if line.lower().startswith("content-length:"):
            length = int(line.split(":", 1)[1])
    try:
        body = json.loads(await reader.readexactly(length) or b"{}")
        status, answer = await plan_request(body)
    except (ValueError, TypeError) as e:
        status, answer = 400, {"error": f"bad request: {e}"}
    data = json.dumps(answer, indent=2).encode()
    writer.write(f"HTTP/1.1 {status} X\r\nContent-Type: application/json\r\n"
                 f"Content-Length: {len(data)}\r\nConnection: close\r\n\r\n".encode() + data)
    await writer.drain()
    writer.close()


async def main() -> None:
    if "--once" in sys.argv:
        # Many requests at once share one event loop and one guesser.
        results = await asyncio.gather(*[plan_request({"request_id": f"r{i}"}) for i in range(5)])
        for status, answer in results:
            print(status, json.dumps(answer)[:120])
        return
    server = await asyncio.start_server(_serve_one, "127.0.0.1", 8765)
    print("serving on http://127.0.0.1:8765 -- POST a JSON body like {\"rounds\": 4}")
    async with server:
        await server.serve_forever()


if __name__ == "__main__":
    asyncio.run(main())
