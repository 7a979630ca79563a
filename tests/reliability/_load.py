"""Bounded asyncio load against a server on 127.0.0.1 (shared by the load test and benchmark).

:func:`hammer` runs ``concurrency`` workers, each sending ``request(client, worker, i)``
requests one after another over one ``httpx.AsyncClient`` until ``seconds`` have passed or
``max_requests`` have been sent in total - whichever comes first, so every run stops by
itself. It returns per-request latencies and every failure (non-2xx or transport error).
"""

from __future__ import annotations

import asyncio
import os
import time
from collections.abc import Awaitable, Callable
from dataclasses import dataclass, field

import httpx
import numpy as np

__all__ = ["LoadResult", "hammer", "load_seconds"]

Request = Callable[[httpx.AsyncClient, int, int], Awaitable[httpx.Response]]
MAX_LOAD_SECONDS = 300.0


def load_seconds(default: float) -> float:
    """``RISKFIT_LOAD_SECONDS`` if set (clamped to 1..300 s), else ``default``."""
    raw = os.environ.get("RISKFIT_LOAD_SECONDS")
    value = float(raw) if raw else default
    return min(max(value, 1.0), MAX_LOAD_SECONDS)


@dataclass
class LoadResult:
    """What a load run measured; latencies in seconds, one per completed request."""

    seconds: float
    latencies: list[float] = field(default_factory=list)
    failures: list[str] = field(default_factory=list)

    @property
    def requests(self) -> int:
        return len(self.latencies) + len(self.failures)

    @property
    def throughput(self) -> float:
        return len(self.latencies) / self.seconds if self.seconds > 0 else 0.0

    def percentile_ms(self, q: float) -> float:
        if not self.latencies:
            return float("nan")
        return float(np.percentile(np.asarray(self.latencies), q) * 1000.0)


async def hammer(
    base_url: str,
    request: Request,
    *,
    concurrency: int,
    seconds: float,
    max_requests: int,
    headers: dict[str, str] | None = None,
    timeout: float = 60.0,
) -> LoadResult:
    """Send requests from ``concurrency`` workers for at most ``seconds`` / ``max_requests``."""
    if not base_url.startswith(("http://127.0.0.1:", "http://localhost:")):
        raise ValueError(f"load goes to this machine only, not {base_url!r}")
    budget = [max_requests]
    limits = httpx.Limits(max_connections=concurrency, max_keepalive_connections=concurrency)
    started = time.perf_counter()
    deadline = started + seconds
    result = LoadResult(seconds=0.0)

    async def worker(client: httpx.AsyncClient, w: int) -> None:
        i = 0
        while time.perf_counter() < deadline and budget[0] > 0:
            budget[0] -= 1
            t0 = time.perf_counter()
            try:
                response = await request(client, w, i)
            except httpx.HTTPError as error:
                result.failures.append(f"transport: {error!r}")
            else:
                if response.is_success:
                    result.latencies.append(time.perf_counter() - t0)
                else:
                    result.failures.append(f"{response.status_code}: {response.text[:300]}")
            i += 1

    async with httpx.AsyncClient(
        base_url=base_url, limits=limits, timeout=timeout, headers=headers
    ) as client:
        await asyncio.gather(*(worker(client, w) for w in range(concurrency)))
    result.seconds = time.perf_counter() - started
    return result
