"""Wall-clock time per named step of one request, for the ``Server-Timing`` response header.

``Server-Timing`` is the W3C header for server-side timings (https://www.w3.org/TR/server-timing/):
a comma-separated list of ``name;dur=<milliseconds>``. A fit answers with, in order,
``read`` (body and file parsing), ``validate`` (typed columns and limits), ``encode`` (levels,
knots, design matrix), ``fit`` (Newton and covariance), ``inference`` (term table, drop-term
LR tests), ``summaries`` (fit statistics, drift baselines, fingerprint) and ``store``
(the version row and its commit). Nothing else depends on it.
"""

from __future__ import annotations

import time

__all__ = ["StepTimes"]


class StepTimes:
    """Consecutive laps: ``lap(name)`` books the time since the previous lap under ``name``."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self._last = time.perf_counter()

    def lap(self, name: str) -> None:
        now = time.perf_counter()
        self.seconds[name] = self.seconds.get(name, 0.0) + now - self._last
        self._last = now

    def header(self) -> str:
        """The ``Server-Timing`` value: ``read;dur=12.3, validate;dur=4.0, ...`` (ms)."""
        return ", ".join(f"{k};dur={v * 1e3:.1f}" for k, v in self.seconds.items())
