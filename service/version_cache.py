"""What scoring reads from the store, kept in memory: decoded versions and the last champion seen.

* Versions are immutable, so a decoded version (keyed by ``(model id, number)``) is never stale.
* Models are never renamed or deleted, so ``name -> model`` is never stale either.
* The champion *can* change, from this process or another one on the same database. The cache
  keeps the champion number last seen for each model, and the scoring path never trusts it on
  its own: the score-log commit re-reads the champion inside its write transaction
  (:func:`service.score_writer.check_champion`) and refuses rows scored with another version
  (:class:`~service.score_writer.ChampionChangedError`); the request then scores again with the
  number the commit saw. So a champion change acknowledged to anyone is served by every
  process from the next request on (no staleness window), and the check costs one indexed
  read per group commit instead of a session and a store read per request. The writer also
  tells the cache what it read (:meth:`VersionCache.champion_seen`).
* A model without a champion, or one not cached yet, is read from the store (errors always are).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.orm import RiskModel
from models_store.versions import require_version
from service.score_guard import ExtrapolationGuard, guard_of
from service.score_input import LevelSpelling, level_spelling
from service.score_record import RecordPlan
from service.stats.design import Encoding

__all__ = ["LoadedVersion", "VersionCache"]


@dataclass(frozen=True)
class LoadedVersion:
    """What scoring needs from a stored version, decoded once."""

    number: int
    encoding: Encoding
    kinds: dict[str, str]  # feature name -> kind
    offset: str | None  # name of the offset column the fit used, if any
    term_names: tuple[str, ...]
    coef: np.ndarray
    cov: np.ndarray
    ranges: dict[str, Any]
    record_plan: RecordPlan = field(init=False, repr=False, compare=False)
    spellings: dict[str, LevelSpelling] = field(init=False, repr=False, compare=False)
    _guards: dict[float, ExtrapolationGuard] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        # compiled once per version: the single-record path (service.score_record)
        object.__setattr__(self, "record_plan", RecordPlan(self.encoding, self.inputs, self.offset))
        spellings = {
            f.name: level_spelling(f.levels)
            for f in self.encoding.features
            if f.kind == "categorical"
        }
        object.__setattr__(self, "spellings", spellings)
        object.__setattr__(self, "_guards", {})

    def guard(self, limit: float) -> ExtrapolationGuard:
        """The extrapolation guard for ``limit`` training ranges (built once per limit)."""
        found = self._guards.get(limit)
        if found is None:
            found = self._guards[limit] = guard_of(self.encoding, limit)
        return found

    @property
    def inputs(self) -> list[str]:
        """The raw columns a record must carry (features, then the offset column)."""
        return list(self.kinds) + ([self.offset] if self.offset else [])


class VersionCache:
    """In-memory cache of decoded versions (immutable, so never stale); bounded in size."""

    def __init__(self, max_entries: int = 256) -> None:
        self._items: dict[tuple[int, int], LoadedVersion] = {}
        self._lock = threading.Lock()
        self.max_entries = max_entries
        self._models: dict[str, tuple[RiskModel, int]] = {}  # name -> (model, champion seen)
        self._names: dict[int, str] = {}  # model id -> name

    def peek(self, model_id: int, number: int) -> LoadedVersion | None:
        """The decoded version if cached (no store read)."""
        return self._items.get((model_id, number))

    def model(self, name: str) -> tuple[RiskModel, int] | None:
        """``(model, champion number last seen)`` for ``name``, or None (read the store)."""
        return self._models.get(name)

    def remember_model(self, model: RiskModel, champion: int | None) -> None:
        """Keep ``model`` (detached, read-only) and its champion (not kept without one)."""
        if champion is None:
            return
        with self._lock:
            if len(self._models) >= self.max_entries:
                self._models.clear()
                self._names.clear()
            self._models[model.name] = (model, champion)
            self._names[model.id] = model.name

    def champion_seen(self, model_id: int, champion: int | None) -> None:
        """The champion of ``model_id`` as a commit just read it (None: forget the model)."""
        name = self._names.get(model_id)
        hit = self._models.get(name) if name is not None else None
        if hit is None or hit[1] == champion:
            return
        with self._lock:
            if champion is None:
                self._models.pop(hit[0].name, None)
            else:
                self._models[hit[0].name] = (hit[0], champion)

    def get(self, session: Session, model: RiskModel, number: int) -> LoadedVersion:
        key = (model.id, number)
        hit = self._items.get(key)
        if hit is not None:
            return hit
        row = require_version(session=session, model=model, number=number)
        spec = row.spec
        loaded = LoadedVersion(
            number=row.number,
            encoding=Encoding.from_dict(row.encoding),
            kinds={f["name"]: f["kind"] for f in spec["features"]},
            offset=(spec.get("options") or {}).get("offset"),
            term_names=tuple(row.term_names),
            coef=np.asarray(row.coef, dtype=np.float64),
            cov=np.asarray(row.cov, dtype=np.float64),
            ranges=row.training_ranges,
        )
        with self._lock:
            if len(self._items) >= self.max_entries:
                self._items.pop(next(iter(self._items)))
            self._items[key] = loaded
        return loaded
