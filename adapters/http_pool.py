"""One connection pool per event loop, and one gate per endpoint, shared by all loops in it.

Hundreds of plan loops in one process talk to the same few endpoints. Opening a
client per loop (or per call) would open a connection per call; one
``httpx.AsyncClient`` per event loop keeps connections alive and reuses them. The
client cannot cross event loops (its connections belong to the loop that opened
them), so each running loop gets its own, found by the loop itself.

An endpoint's gate — the concurrency limit and the rate limit — must be shared by
every loop that calls it, or the limits would hold per loop and multiply. Gates
live beside the client, keyed by what identifies the endpoint and its limits.

A loop that has been closed (``asyncio.run`` returned) is forgotten at the next
lookup from any loop, and a loop no longer referenced drops out by itself, so
nothing is carried from one ``asyncio.run`` to the next.
"""

from __future__ import annotations

import asyncio
import weakref
from dataclasses import dataclass, field

import httpx

from plansieve.adapters.rate_limit import TokenBucket

# The gates bound how many requests are in flight; the pool itself adds no second
# limit (which would queue requests inside httpx, out of sight of the gates) and keeps
# every idle connection, so a burst of N concurrent calls reuses N connections.
POOL_LIMITS = httpx.Limits(max_connections=None, max_keepalive_connections=None,
                           keepalive_expiry=30.0)

GateKey = tuple[str, str, int, "float | None"]


@dataclass
class Gate:
    """What every call to one endpoint passes through: ``semaphore`` (held while the
    request is in flight) and ``bucket`` (taken before it is sent; None without a rate
    limit)."""

    semaphore: asyncio.Semaphore
    bucket: TokenBucket | None


@dataclass
class _Share:
    client: httpx.AsyncClient | None = None
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


def shared_client() -> httpx.AsyncClient:
    """The running event loop's client, opened on first use (and again after closing)."""
    share = _share()
    if share.client is None or share.client.is_closed:
        share.client = httpx.AsyncClient(limits=POOL_LIMITS, follow_redirects=False)
    return share.client


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
    """Close the running event loop's client and forget its gates.

    Calls in flight on other tasks fail as broken connections; call this when the
    loops of this event loop are done (a later call opens a fresh client).
    """
    loop = asyncio.get_running_loop()
    share = _shares.pop(loop, None)
    if share is not None and share.client is not None:
        await share.client.aclose()
