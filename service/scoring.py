"""Domain operation: score records with a stored version and log every score durably.

    version (champion unless given) -> columns -> design_matrix -> predict (with interval)
    -> per-record warnings (extrapolation) -> optional contributions -> score log -> answer

The score log rows are inserted in bulk and committed before the answer is built, so every
returned ``score_id`` is in the store when the client reads it. Client keys (``key`` in a
record) are unique per model: a repeated or already used key refuses the whole batch (409)
and nothing is written.

Versions are immutable, so their decoded encoding, coefficients and covariance are cached in
memory keyed by ``(model id, version number)``; the only per-request store read besides the
key check is the champion number (one indexed row), so a champion change takes effect at once.
"""

from __future__ import annotations

import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.champions import current_champion
from models_store.orm import RiskModel
from models_store.scores import add_scores, new_score_id
from models_store.versions import require_version
from service.data_io import FieldNamer, coerce_column, columns_from_rows
from service.errors import DataError, VersionNotFoundError
from service.stats.design import Encoding, design_matrix
from service.stats.predict import contributions, predict

__all__ = ["CI_METHOD", "LoadedVersion", "VersionCache", "score_records"]

CI_METHOD = "wald-logit"
KEY_FIELD = "key"


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


class VersionCache:
    """In-memory cache of decoded versions (immutable, so never stale); bounded in size."""

    def __init__(self, max_entries: int = 256) -> None:
        self._items: dict[tuple[int, int], LoadedVersion] = {}
        self._lock = threading.Lock()
        self.max_entries = max_entries

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


def resolve_version(session: Session, model: RiskModel, version: int | None) -> int:
    """The version to score with: the one asked for, or the current champion."""
    if version is not None:
        return version
    champion = current_champion(session=session, model=model)
    if champion is None:
        raise VersionNotFoundError(
            f"risk model {model.name!r} has no champion version yet",
            field="version",
            value=None,
            remedy=f"fit a version with POST /risk-models/{model.name}/versions",
        )
    return champion


def _record_field(name: str) -> FieldNamer:
    return lambda i: f"records[{i}].{name}"


def _record_columns(
    records: Sequence[Mapping[str, Any]], v: LoadedVersion
) -> tuple[dict[str, np.ndarray], np.ndarray | None]:
    names = list(v.kinds) + ([v.offset] if v.offset else [])
    raw = columns_from_rows(records, names, "records")
    cols = {
        name: coerce_column(name, kind, raw[name], _record_field(name))
        for name, kind in v.kinds.items()
    }
    offset = None
    if v.offset:
        offset = coerce_column(v.offset, "numeric", raw[v.offset], _record_field(v.offset))
    return cols, offset


def _keys(records: Sequence[Mapping[str, Any]]) -> list[str | None]:
    keys: list[str | None] = []
    for i, r in enumerate(records):
        k = r.get(KEY_FIELD)
        if k is not None and not isinstance(k, str):
            k = str(int(k)) if isinstance(k, float) and k.is_integer() else str(k)
        if k is not None and not (1 <= len(k) <= 200):
            raise DataError(
                "a record key must be 1 to 200 characters",
                field=f"records[{i}].key",
                value=k,
                remedy="use a shorter identifier, or omit key",
            )
        keys.append(k)
    return keys


def _warnings(
    n: int, extrapolated: Mapping[str, np.ndarray], cols: Mapping[str, np.ndarray], v: LoadedVersion
) -> list[list[str]]:
    out: list[list[str]] = [[] for _ in range(n)]
    for name, mask in extrapolated.items():
        r = v.ranges.get(name, {})
        for i in np.flatnonzero(mask):
            out[int(i)].append(
                f"extrapolation: {name}={float(cols[name][i]):g} is outside the training "
                f"range [{r.get('min', float('nan')):g}, {r.get('max', float('nan')):g}]"
            )
    return out


def score_records(
    *,
    session: Session,
    model: RiskModel,
    records: Sequence[Mapping[str, Any]],
    version: int | None,
    confidence_level: float,
    explain: bool,
    cache: VersionCache,
) -> dict[str, Any]:
    """Score, log and describe ``records``; returns the JSON-ready answer body."""
    number = resolve_version(session, model, version)
    v = cache.get(session, model, number)
    keys = _keys(records)
    cols, offset = _record_columns(records, v)
    design = design_matrix(v.encoding, cols, field_prefix="records")
    pred = predict(design.X, v.coef, v.cov, offset=offset, confidence_level=confidence_level)
    n = len(records)
    used = list(v.kinds) + ([v.offset] if v.offset else [])
    ids = [new_score_id() for _ in range(n)]
    created_at = datetime.now(UTC)
    rows = [
        {
            "id": ids[i],
            "key": keys[i],
            "inputs": {name: records[i][name] for name in used},
            "eta": pred.eta[i],
            "se_eta": pred.se_eta[i],
            "probability": pred.probability[i],
        }
        for i in range(n)
    ]
    add_scores(
        session=session, model=model, version_number=number, rows=rows, created_at=created_at
    )
    session.commit()  # durable before the answer exists
    warnings = _warnings(n, design.extrapolated, cols, v)
    contrib = contributions(design.X, v.coef) if explain else None
    eta, se, p = pred.eta.tolist(), pred.se_eta.tolist(), pred.probability.tolist()
    lo, hi = pred.ci_lower.tolist(), pred.ci_upper.tolist()
    scores = []
    for i in range(n):
        item: dict[str, Any] = {
            "score_id": ids[i],
            "key": keys[i],
            "probability": p[i],
            "ci_lower": lo[i],
            "ci_upper": hi[i],
            "eta": eta[i],
            "se_eta": se[i],
            "warnings": warnings[i],
        }
        if contrib is not None:
            item["contributions"] = dict(zip(v.term_names, contrib[i].tolist(), strict=True))
        scores.append(item)
    return {
        "model": model.name,
        "version": number,
        "confidence_level": confidence_level,
        "ci_method": CI_METHOD,
        "n_records": n,
        "created_at": created_at,
        "scores": scores,
    }
