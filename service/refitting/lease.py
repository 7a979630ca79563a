"""The refit lock's heartbeat: a background thread renews the lease while a refit runs.

    with LeaseKeeper(engine, claim) as keeper:   # renews every lease/3 seconds
        ... work ...; keeper.check()              # raises if another refit took over

Each renewal is :func:`models_store.refits.renew_refit_claim`: one ``UPDATE`` of one row by
token in its own transaction, so on SQLite it holds the single write lock for well under a
millisecond (a scoring writer waits that long at most) and it is made every lease/3 seconds
only (every 20 s for the default 60 s lease). A renewal that fails (the database busy past
its busy timeout, a dropped connection) is logged and tried again a third of an interval
later; it never stops the refit. A renewal that finds the token gone means another refit
took the lock over after this one's lease ran out: the keeper stops renewing and
:meth:`LeaseKeeper.check` raises, and in any case the refit's result is stored only if
:func:`models_store.refits.confirm_refit_claim` still finds the token in the storing
transaction. The thread is a daemon and stops when the block ends (or with its process: then
the lease runs out one lease later and the next refit takes over).
"""

from __future__ import annotations

import logging
import threading
from types import TracebackType

from sqlalchemy.engine import Engine

from models_store.refits import RefitClaim, renew_refit_claim
from service.errors import RefitInProgressError

__all__ = ["LeaseKeeper", "lost_lock_error"]

log = logging.getLogger("riskfit.refitting")


def lost_lock_error(claim: RefitClaim) -> RefitInProgressError:
    """The 409 of a refit whose lease ran out and whose lock another refit took over."""
    return RefitInProgressError(
        "this refit lost the model's refit lock before storing its result (its lease of "
        f"{claim.lease_seconds:g} s ran out without renewal and another refit took the lock "
        "over); nothing was stored",
        field="model",
        value=claim.model_id,
        remedy="see GET .../refits for the refit that took over; if renewals fail (the "
        "server log says why), lengthen RISKFIT_REFIT_LOCK_LEASE_SECONDS",
        details={"refit_id": claim.run_id},
    )


class LeaseKeeper:
    """Renew ``claim``'s lease from a daemon thread every ``lease/3`` seconds."""

    def __init__(self, engine: Engine, claim: RefitClaim, interval: float | None = None) -> None:
        self.engine = engine
        self.claim = claim
        self.interval = interval if interval is not None else claim.lease_seconds / 3.0
        self.renewals = 0
        self.failures = 0
        self.lost = threading.Event()
        self._stop = threading.Event()
        self._thread = threading.Thread(
            target=self._run, name=f"refit-lease-{claim.model_id}", daemon=True
        )

    def _run(self) -> None:
        wait = self.interval
        while not self._stop.wait(wait):
            try:
                held = renew_refit_claim(engine=self.engine, claim=self.claim)
            except Exception as exc:  # never let a renewal failure end the refit
                self.failures += 1
                wait = self.interval / 3.0
                log.warning(
                    "refit %s of model %s: lease renewal failed (%s); retrying in %.1f s",
                    self.claim.run_id,
                    self.claim.model_id,
                    exc,
                    wait,
                )
                continue
            if not held:
                self.lost.set()
                log.warning(
                    "refit %s of model %s: lease lost to another refit; stopping renewals",
                    self.claim.run_id,
                    self.claim.model_id,
                )
                return
            self.renewals += 1
            wait = self.interval

    def check(self) -> None:
        """Raise :func:`lost_lock_error` if a renewal found the lock taken over."""
        if self.lost.is_set():
            raise lost_lock_error(self.claim)

    def __enter__(self) -> LeaseKeeper:
        self._thread.start()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self._stop.set()
        self._thread.join(timeout=5.0)
