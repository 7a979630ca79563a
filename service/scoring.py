"""Domain operation: score records with a stored version and log every score durably.

    version (champion unless given) -> columns -> design_matrix -> predict (with interval)
    -> per-record warnings (extrapolation) -> optional contributions -> score log -> answer

Input comes as rows (``records``: one dict per record) or as columns (``columns``: one
list per feature, the faster layout for big batches); both become one :class:`ScoreInput`
of raw columns, validated as arrays (never one model object per record).

The score log rows are inserted in bulk and committed before the answer is built, so every
returned ``score_id`` is in the store when the client reads it. Client keys (``key`` in a
record, or the ``key`` column) are unique per model: a repeated or already used key refuses
the whole batch (409) and nothing is written.

Versions are immutable, so their decoded encoding, coefficients and covariance are cached in
memory keyed by ``(model id, version number)``; the only per-request store read besides the
key check is the champion number (one indexed row), so a champion change takes effect at once.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from operator import itemgetter, methodcaller
from typing import Any

import numpy as np
import orjson
from sqlalchemy.orm import Session

from models_store.champions import current_champion, model_with_champion
from models_store.models import model_not_found
from models_store.orm import RiskModel
from models_store.versions import require_version
from service.data_io import FieldNamer, coerce_column, columns_from_rows
from service.errors import DataError, VersionNotFoundError
from service.score_writer import ScoreLogWriter, ScoreRows
from service.stats.design import Encoding, design_matrix
from service.stats.predict import contributions, predict

__all__ = [
    "CI_METHOD",
    "LoadedVersion",
    "ScoreInput",
    "ScoredBatch",
    "VersionCache",
    "columns_input",
    "log_batch",
    "new_score_ids",
    "prepare_batch",
    "records_input",
    "score_batch",
    "score_records",
    "scoring_model",
    "version_to_score",
]

CI_METHOD = "wald-logit"
KEY_FIELD = "key"
_HEX = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)
_DASHES = (8, 13, 18, 23)
_HEX_AT = np.array([i for i in range(36) if i not in _DASHES])
_NO_WARNINGS: tuple[str, ...] = ()
_FEW_IDS = 16
GROUP_COMMIT_MAX_ROWS = 1000  # bigger batches gain nothing from sharing a commit


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
    return _champion_or_error(model, current_champion(session=session, model=model))


def _champion_or_error(model: RiskModel, champion: int | None) -> int:
    if champion is None:
        raise VersionNotFoundError(
            f"risk model {model.name!r} has no champion version yet",
            field="version",
            value=None,
            remedy=f"fit a version with POST /risk-models/{model.name}/versions",
        )
    return champion


def new_score_ids(n: int) -> list[str]:
    """``n`` time-ordered UUIDs (version 7, RFC 9562 sec. 5.7) as 36-character text, ascending.

    48 bits of Unix time in milliseconds, then 74 random bits from ``os.urandom``, made and
    formatted in bulk with numpy. The batch is sorted, so the score log's primary-key index
    grows at its right edge instead of taking random page splits.
    """
    ms = time.time_ns() // 1_000_000
    if n <= _FEW_IDS:  # a few ids: plain bytes beat numpy's per-call overhead
        return sorted(_uuid7_text(ms) for _ in range(n))
    raw = np.frombuffer(os.urandom(16 * n), dtype=np.uint8).reshape(n, 16).copy()
    raw[:, :6] = np.frombuffer(ms.to_bytes(6, "big"), dtype=np.uint8)
    raw[:, 6] = (raw[:, 6] & 0x0F) | 0x70
    raw[:, 8] = (raw[:, 8] & 0x3F) | 0x80
    raw = np.sort(raw.view("S16").ravel()).view(np.uint8).reshape(n, 16)
    nibbles = np.empty((n, 32), dtype=np.uint8)
    nibbles[:, 0::2] = raw >> 4
    nibbles[:, 1::2] = raw & 0x0F
    text = np.full((n, 36), ord("-"), dtype=np.uint8)
    text[:, _HEX_AT] = _HEX[nibbles]
    return text.view("S36").ravel().astype("U36").tolist()


def _uuid7_text(ms: int) -> str:
    b = bytearray(ms.to_bytes(6, "big") + os.urandom(10))
    b[6] = (b[6] & 0x0F) | 0x70
    b[8] = (b[8] & 0x3F) | 0x80
    h = b.hex()
    return f"{h[:8]}-{h[8:12]}-{h[12:16]}-{h[16:20]}-{h[20:]}"


@dataclass(frozen=True)
class ScoreInput:
    """Raw columns of a batch (name -> n values), client keys (None: no record has one)."""

    columns: Mapping[str, Sequence[Any] | np.ndarray]
    keys: list[str | None] | None
    n: int
    field: Callable[[str, int], str]  # (column, row) -> field path for errors
    prefix: str  # "records" or "columns": the request part that holds the data


def _key_text(value: Any, where: str) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, str | int | float):
        raise DataError(
            "a record key must be text or a number",
            field=where,
            value=repr(value)[:80],
            remedy="use a string identifier, or omit key",
        )
    k = value if isinstance(value, str) else _number_text(value)
    if not 1 <= len(k) <= 200:
        raise DataError(
            "a record key must be 1 to 200 characters",
            field=where,
            value=k,
            remedy="use a shorter identifier, or omit key",
        )
    return k


def _number_text(value: float) -> str:
    return str(int(value)) if isinstance(value, float) and value.is_integer() else str(value)


def _keys(values: Sequence[Any], field: Callable[[int], str]) -> list[str | None] | None:
    if values.count(None) == len(values):
        return None
    return [_key_text(v, field(i)) for i, v in enumerate(values)]


def records_input(records: Sequence[Mapping[str, Any]], names: Sequence[str]) -> ScoreInput:
    """Rows (``records[i][name]``) as columns; a record lacking a name is a missing feature."""
    try:
        cols: dict[str, Any] = {name: list(map(itemgetter(name), records)) for name in names}
    except KeyError:
        cols = columns_from_rows(records, names, "records")  # names the first record lacking one
    keys = _keys(list(map(methodcaller("get", KEY_FIELD), records)), lambda i: f"records[{i}].key")
    return ScoreInput(cols, keys, len(records), lambda name, i: f"records[{i}].{name}", "records")


def columns_input(columns: Mapping[str, Sequence[Any]], names: Sequence[str]) -> ScoreInput:
    """Columns (``columns[name][i]``); all of the same length, every needed name present."""
    lengths = {name: len(col) for name, col in columns.items()}
    n = max(lengths.values(), default=0)
    for name in [*names, *((KEY_FIELD,) if KEY_FIELD in columns else ())]:
        if name not in columns:
            raise DataError(
                f"columns has no column {name!r}",
                field=f"columns.{name}",
                value=None,
                remedy=f"give a list of values for {name} (one per record)",
            )
        if lengths[name] != n or n == 0:
            raise DataError(
                f"column {name} has {lengths[name]} values, the longest has {n}",
                field=f"columns.{name}",
                value=lengths[name],
                remedy="give every column one value per record (at least one record)",
            )
    raw_keys = columns.get(KEY_FIELD)
    keys = _keys(raw_keys, lambda i: f"columns.key[{i}]") if raw_keys is not None else None
    return ScoreInput(
        {name: columns[name] for name in names},
        keys,
        n,
        lambda name, i: f"columns.{name}[{i}]",
        "columns",
    )


def _namer(data: ScoreInput, name: str) -> FieldNamer:
    return lambda i: data.field(name, i)


def _coerce(batch: ScoreInput, name: str, kind: str) -> np.ndarray:
    values = batch.columns[name]
    if kind == "categorical" and set(map(type, values)) == {str}:
        return np.array(values, dtype=object)  # already level text: nothing to convert
    return coerce_column(name, kind, values, _namer(batch, name))


def _json_pieces(values: Sequence[Any] | np.ndarray, numeric: bool) -> list[str]:
    """Each value's JSON text (numbers: one orjson call for the whole column)."""
    if numeric:
        try:
            return orjson.dumps(values, option=orjson.OPT_SERIALIZE_NUMPY)[1:-1].decode().split(",")
        except orjson.JSONEncodeError:  # integers beyond 64 bits
            return [orjson.dumps(float(v)).decode() for v in values]
    if set(map(type, values)) == {str}:
        text_of = {v: orjson.dumps(v).decode() for v in set(values)}
        return list(map(text_of.__getitem__, values))
    seen: dict[tuple[type, Any], str] = {}
    out = []
    for v in values:
        k = (v.__class__, v)
        text = seen.get(k)
        if text is None:
            text = seen[k] = orjson.dumps(v).decode()
        out.append(text)
    return out


def _inputs_json(data: ScoreInput, v: LoadedVersion) -> list[str]:
    """Each record's inputs (the columns the version uses) as a JSON object, built per column."""
    names = v.inputs
    template = "{" + ",".join(orjson.dumps(nm).decode().replace("%", "%%") + ":%s" for nm in names)
    template += "}"
    pieces = [
        _json_pieces(data.columns[nm], v.kinds.get(nm, "numeric") != "categorical") for nm in names
    ]
    return [template % t for t in zip(*pieces, strict=True)]


def _warnings(
    n: int, extrapolated: Mapping[str, np.ndarray], cols: Mapping[str, np.ndarray], v: LoadedVersion
) -> list[Any]:
    out: list[Any] = [_NO_WARNINGS] * n
    for name, mask in extrapolated.items():
        r = v.ranges.get(name, {})
        for i in np.flatnonzero(mask):
            out[int(i)] = [
                *out[int(i)],
                f"extrapolation: {name}={float(cols[name][i]):g} is outside the training "
                f"range [{r.get('min', float('nan')):g}, {r.get('max', float('nan')):g}]",
            ]
    return out


_ITEM_KEYS = ("score_id", "key", "probability", "ci_lower", "ci_upper", "eta", "se_eta", "warnings")


@dataclass(frozen=True)
class ScoredBatch:
    """A batch scored but not yet logged: ``rows`` to commit, then ``answer()`` to build."""

    rows: ScoreRows
    answer: Callable[[], dict[str, Any]]


def prepare_batch(
    *,
    session: Session,
    model: RiskModel,
    data: Callable[[LoadedVersion], ScoreInput],
    version: int | None,
    confidence_level: float,
    explain: bool,
    cache: VersionCache,
) -> ScoredBatch:
    """Score a batch (``data(v)`` gives the raw columns version ``v`` needs); nothing stored.

    The caller commits ``rows`` and only then calls ``answer()`` (the JSON-ready body).
    """
    number = resolve_version(session, model, version)
    v = cache.get(session, model, number)
    batch = data(v)
    cols = {name: _coerce(batch, name, kind) for name, kind in v.kinds.items()}
    offset = None
    if v.offset:
        offset = coerce_column(
            v.offset, "numeric", batch.columns[v.offset], _namer(batch, v.offset)
        )
    design = design_matrix(v.encoding, cols, field_prefix=batch.prefix)
    pred = predict(design.X, v.coef, v.cov, offset=offset, confidence_level=confidence_level)
    n = batch.n
    ids = new_score_ids(n)
    created_at = datetime.now(UTC)
    eta, se, p = pred.eta.tolist(), pred.se_eta.tolist(), pred.probability.tolist()
    rows = ScoreRows(model, number, ids, batch.keys, _inputs_json(batch, v), eta, se, p, created_at)

    def answer() -> dict[str, Any]:
        warnings = _warnings(n, design.extrapolated, cols, v)
        keys = batch.keys if batch.keys is not None else [None] * n
        lo, hi = pred.ci_lower.tolist(), pred.ci_upper.tolist()
        scores = [
            dict(zip(_ITEM_KEYS, t, strict=True))
            for t in zip(ids, keys, p, lo, hi, eta, se, warnings, strict=True)
        ]
        if explain:
            contrib = contributions(design.X, v.coef).tolist()
            for item, row in zip(scores, contrib, strict=True):
                item["contributions"] = dict(zip(v.term_names, row, strict=True))
        return {
            "model": model.name,
            "version": number,
            "confidence_level": confidence_level,
            "ci_method": CI_METHOD,
            "n_records": n,
            "created_at": created_at,
            "scores": scores,
        }

    return ScoredBatch(rows, answer)


def score_batch(
    *,
    session: Session,
    model: RiskModel,
    data: Callable[[LoadedVersion], ScoreInput],
    version: int | None,
    confidence_level: float,
    explain: bool,
    cache: VersionCache,
    writer: ScoreLogWriter | None = None,
) -> dict[str, Any]:
    """Score, log and describe a batch (:func:`prepare_batch`, then the commit, then the answer).

    With a ``writer``, batches of up to :data:`GROUP_COMMIT_MAX_ROWS` rows are committed by
    its group commit (still before this returns); bigger ones commit in ``session``.
    Returns the JSON-ready answer body (numbers as Python floats, one dict per record).
    """
    scored = prepare_batch(
        session=session,
        model=model,
        data=data,
        version=version,
        confidence_level=confidence_level,
        explain=explain,
        cache=cache,
    )
    log_batch(session, scored.rows, writer)
    return scored.answer()


def log_batch(session: Session, rows: ScoreRows, writer: ScoreLogWriter | None) -> None:
    """Commit ``rows`` to the score log; returns once they are durable.

    Up to :data:`GROUP_COMMIT_MAX_ROWS` rows go through ``writer``'s group commit (when given),
    bigger batches are inserted and committed in ``session``.
    """
    if writer is not None and len(rows.ids) <= GROUP_COMMIT_MAX_ROWS:
        session.commit()  # ends this request's read transaction
        writer.write(rows)  # returns once the rows are committed (group commit)
    else:
        rows.insert(session)
        session.commit()  # durable before the answer exists


def scoring_model(*, session: Session, name: str) -> tuple[RiskModel, int | None]:
    """The model called ``name`` (404 if none) and its champion number, in one store read."""
    found = model_with_champion(session=session, name=name)
    if found is None:
        raise model_not_found(name)
    return found


def version_to_score(model: RiskModel, version: int | None, champion: int | None) -> int:
    """The version asked for, else the champion (VersionNotFoundError when there is none)."""
    return version if version is not None else _champion_or_error(model, champion)


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
    """:func:`score_batch` for a list of row dicts."""
    return score_batch(
        session=session,
        model=model,
        data=lambda v: records_input(records, v.inputs),
        version=version,
        confidence_level=confidence_level,
        explain=explain,
        cache=cache,
    )
