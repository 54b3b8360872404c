"""Connection pools per event loop, and one gate per endpoint, shared by all loops in it.

Hundreds of plan loops in one process talk to the same few endpoints. Opening a
client per loop (or per call) would open a connection per call; clients kept per
event loop keep connections alive and reuse them. A client cannot cross event
loops (its connections belong to the loop that opened them), so each running loop
gets its own, found by the loop itself.

The connections are split over small clients ("shards") of at most
``SHARD_CONNECTIONS`` calls in flight each, and each call leases one (:func:`lease`):
httpx's pool does bookkeeping over all of its connections at every request, which
grows with the square of the connections in one pool, so at 200 calls in flight
one big pool spends most of the client's time there (measured by
bench/bench_http.py). Split, the connections opened still stay near the number
of calls in flight, not the number of calls.

An endpoint's gate — the concurrency limit and the rate limit — must be shared by
every loop that calls it, or the limits would hold per loop and multiply. Gates
live beside the clients, keyed by what identifies the endpoint and its limits.

A loop that has been closed (``asyncio.run`` returned) is forgotten at the next
lookup from any loop, and a loop no longer referenced drops out by itself, so
nothing is carried from one ``asyncio.run`` to the next.
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
import ssl
import weakref
from collections.abc import Iterator
from dataclasses import dataclass, field

import httpx

from plansieve.adapters.rate_limit import TokenBucket

# The gates bound how many requests are in flight; the pool itself adds no second
# limit (which would queue requests inside httpx, out of sight of the gates) and keeps
# every idle connection, so a burst of N concurrent calls reuses N connections.
POOL_LIMITS = httpx.Limits(max_connections=None, max_keepalive_connections=None,
                           keepalive_expiry=30.0)
# Calls in flight a shard takes before another shard is opened.
SHARD_CONNECTIONS = 8

GateKey = tuple[str, str, int, "float | None"]


@dataclass
class Gate:
    """What every call to one endpoint passes through: ``semaphore`` (held while the
    request is in flight) and ``bucket`` (taken before it is sent; None without a rate
    limit)."""

    semaphore: asyncio.Semaphore
    bucket: TokenBucket | None


@dataclass
class _Shard:
    client: httpx.AsyncClient
    busy: int = 0


@dataclass
class _Share:
    shards: list[_Shard] = field(default_factory=list)
    gates: dict[GateKey, Gate] = field(default_factory=dict)


_shares: "weakref.WeakKeyDictionary[asyncio.AbstractEventLoop, _Share]" = \
    weakref.WeakKeyDictionary()


def _share() -> _Share:
    loop = asyncio.get_running_loop()
    for old in [l for l in list(_shares.keys()) if l is not loop and l.is_closed()]:
        # Its connections died with the loop; drop the references so they can be freed.
        _shares.pop(old, None)
    share = _shares.get(loop)
    if share is None:
        share = _shares[loop] = _Share()
    return share


@functools.cache
def _tls() -> ssl.SSLContext:
    """One TLS context for every client of the process: building one reads the whole
    certificate bundle (tens of milliseconds), which a new shard should not repeat.
    httpx's own defaults (certifi, or SSL_CERT_FILE / SSL_CERT_DIR when set)."""
    return httpx.create_ssl_context()


@contextlib.contextmanager
def lease() -> Iterator[httpx.AsyncClient]:
    """A client of the running event loop's pool for one call: the busiest shard that
    still has room, or a new one when every shard has ``SHARD_CONNECTIONS`` calls in
    flight. Filling shards before spreading keeps each call on a shard whose idle
    connections it can reuse, so the connections opened stay at the peak of calls in
    flight (spreading evenly would open new ones on a quiet shard)."""
    share = _share()
    share.shards = [s for s in share.shards if not s.client.is_closed]
    roomy = [s for s in share.shards if s.busy < SHARD_CONNECTIONS]
    shard = max(roomy, key=lambda s: s.busy, default=None)
    if shard is None:
        shard = _Shard(httpx.AsyncClient(limits=POOL_LIMITS, follow_redirects=False,
                                         verify=_tls()))
        share.shards.append(shard)
    shard.busy += 1
    try:
        yield shard.client
    finally:
        shard.busy -= 1


def open_clients() -> list[httpx.AsyncClient]:
    """The running event loop's clients (for tests and diagnostics)."""
    return [s.client for s in _share().shards if not s.client.is_closed]


def endpoint_gate(method: str, url: str, concurrency: int,
                  requests_per_minute: float | None) -> Gate:
    """The gate every call with these settings shares in the running event loop."""
    share = _share()
    key: GateKey = (method, url, concurrency, requests_per_minute)
    gate = share.gates.get(key)
    if gate is None:
        bucket = TokenBucket(requests_per_minute) if requests_per_minute is not None else None
        gate = share.gates[key] = Gate(asyncio.Semaphore(concurrency), bucket)
    return gate


async def close_shared_clients() -> None:
    """Close the running event loop's clients and forget its gates.

    Calls in flight on other tasks fail as broken connections; call this when the
    loops of this event loop are done (a later call opens a fresh client).
    """
    loop = asyncio.get_running_loop()
    share = _shares.pop(loop, None)
    if share is not None:
        for shard in share.shards:
            await shard.client.aclose()
