"""Start-up warming: build the outcome snapshots and CUSUM limits before the first request.

A server's first monitoring request would otherwise pay for a full read of the model's scored
outcomes (:mod:`.snapshot`) and, for a new segment, the CUSUM limit simulation
(:mod:`.cusum_limits`). :class:`Warmer` does that work in one background thread when the app
starts, for the models with the most recent outcomes (at most the snapshot's capacity):

    models by latest outcome id (newest first)
    -> per model: snapshot (from the stored column blocks and the rows after them, or a
       full read), new column blocks sealed (:mod:`.outcome_blocks`), committed;
       champion segment, both charts' limits (stored ones loaded, missing ones simulated
       and stored), committed

Start-up itself runs one query, the models with outcomes (:func:`recent_model_ids`, an
index scan: about 0.1 s per million outcomes), and starts the thread only if there are any.
Readiness does not wait for the thread: ``/readyz`` answers as soon as the database does. A
monitoring request that arrives while its model is being warmed waits on that model's
snapshot lock and then uses the warmed columns, so it never costs more than without warming.
Warming stores no alerts (only a drift evaluation does). A failure is logged and leaves the
work to the first request. Stopping (app shutdown) takes effect between models; :meth:`stop`
waits for the model in progress.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from models_store.orm import Outcome, RiskModel
from service.config import Settings
from service.monitoring import outcome_blocks
from service.monitoring.cusum_limits import LimitCache
from service.monitoring.cusum_monitor import cusum_segment, segment_limits
from service.monitoring.snapshot import OutcomeSnapshots

__all__ = ["WarmState", "Warmer", "recent_model_ids", "warm_models"]

log = logging.getLogger("riskfit.monitoring")


@dataclass
class WarmState:
    """What warming did so far (read by tests and benchmarks)."""

    models: list[str] = field(default_factory=list)
    seconds: float | None = None  # None while running
    error: str | None = None


def recent_model_ids(session_factory: Callable[[], Session], limit: int) -> list[int]:
    """Ids of the models with outcomes, the latest outcome first, at most ``limit``."""
    latest = func.max(Outcome.id)
    stmt = select(Outcome.model_id).group_by(Outcome.model_id).order_by(latest.desc()).limit(limit)
    with session_factory() as session:
        return [int(m) for m in session.scalars(stmt)]


def _warm_model(
    session: Session,
    model: RiskModel,
    snapshots: OutcomeSnapshots,
    cache: LimitCache,
    settings: Settings,
) -> None:
    snap = snapshots.get(session, model)
    if snapshots.use_blocks:
        outcome_blocks.seal(session, model, snap.cols, overlap=snapshots.overlap)
        session.commit()
    version, reset_at, _ = cusum_segment(session, model, None)
    if version is None:
        return
    segment = snap.columns(since=reset_at, on="score", version=version)
    if segment.n < settings.monitor_min_events:  # the drift view shows no chart then
        return
    segment_limits(
        session=session,
        model=model,
        version=version,
        reset_at=reset_at,
        p_reference=segment.probability,
        settings=settings,
        cache=cache,
    )
    session.commit()


def warm_models(
    session_factory: Callable[[], Session],
    snapshots: OutcomeSnapshots,
    cache: LimitCache,
    settings: Settings,
    *,
    model_ids: list[int] | None = None,
    stop: threading.Event | None = None,
    state: WarmState | None = None,
) -> WarmState:
    """Warm ``model_ids`` (default: :func:`recent_model_ids`) in turn (see module docstring)."""
    state = state or WarmState()
    t0 = time.perf_counter()
    try:
        ids = model_ids
        if ids is None:
            ids = recent_model_ids(session_factory, snapshots.max_models)
        for model_id in ids:  # at most the snapshot's capacity: nothing warmed is evicted
            if stop is not None and stop.is_set():
                break
            with session_factory() as session:
                model = session.get(RiskModel, model_id)
                if model is not None:
                    _warm_model(session, model, snapshots, cache, settings)
                    state.models.append(model.name)
    except Exception as exc:  # warming is an optimisation: the first request does the work
        state.error = f"{type(exc).__name__}: {exc}"
        log.warning("monitoring warm-up stopped: %s", state.error)
    state.seconds = time.perf_counter() - t0
    return state


class Warmer:
    """One background thread running :func:`warm_models`; :meth:`stop` ends and joins it.

    ``model_ids`` given and empty: nothing to warm, no thread is started.
    """

    def __init__(
        self,
        session_factory: Callable[[], Session],
        snapshots: OutcomeSnapshots,
        cache: LimitCache,
        settings: Settings,
        model_ids: list[int] | None = None,
    ) -> None:
        self.state = WarmState()
        self._stop = threading.Event()
        self._idle = model_ids is not None and not model_ids
        self._thread = threading.Thread(
            target=warm_models,
            args=(session_factory, snapshots, cache, settings),
            kwargs={"model_ids": model_ids, "stop": self._stop, "state": self.state},
            name="riskfit-monitoring-warm",
            daemon=True,
        )

    def start(self) -> Warmer:
        if self._idle:
            self.state.seconds = 0.0
        else:
            self._thread.start()
        return self

    def wait(self, timeout: float | None = None) -> bool:
        """True once warming has finished (within ``timeout`` seconds)."""
        if self._idle:
            return True
        self._thread.join(timeout)
        return not self._thread.is_alive()

    def stop(self, timeout: float = 60.0) -> None:
        self._stop.set()
        if not self._idle:
            self._thread.join(timeout)
