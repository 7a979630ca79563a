"""Domain operation: score records with a stored version and log every score durably.

    version (champion unless given) -> columns -> design_matrix -> predict (with interval)
    -> per-record warnings (extrapolation) -> optional contributions -> score log -> answer

Parts live in their own modules: input parsing (:mod:`service.score_input`), decoded versions
(:mod:`service.version_cache`), score-log row contents (:mod:`service.score_log_rows`) and the
group commit (:mod:`service.score_writer`).

The score log rows are inserted in bulk and committed before the answer is built, so every
returned ``score_id`` is in the store when the client reads it. Client keys are unique per
model: a repeated or already used key refuses the whole batch (409) and nothing is written.

Versions are immutable, so their decoded encoding, coefficients and covariance are cached in
memory keyed by ``(model id, version number)``; the only per-request store read besides the
key check is the champion number (one indexed row), so a champion change takes effect at once.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.champions import current_champion, model_with_champion
from models_store.models import model_not_found
from models_store.orm import RiskModel
from service.api.responses import dumps
from service.data_io import coerce_column
from service.errors import VersionNotFoundError
from service.score_answer import ITEM_KEYS, answer_json
from service.score_guard import (
    DEFAULT_EXTRAPOLATION_LIMIT,
    Where,
    check_columns,
    checked_predict,
    extrapolation_warning,
    warnings_of,
)
from service.score_input import (
    PASSTHROUGH_FIELD,
    Passthrough,
    ScoreInput,
    coerced,
    columns_input,
    namer,
    passthrough,
    record_keys,
    records_input,
)
from service.score_log_rows import inputs_json, new_score_ids
from service.score_writer import ScoreLogWriter, ScoreRows
from service.stats.design import design_matrix
from service.stats.predict import contributions
from service.version_cache import LoadedVersion, VersionCache

__all__ = [
    "CI_METHOD",
    "GROUP_COMMIT_MAX_ROWS",
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
    "score_prepared",
    "score_record",
    "score_records",
    "scoring_model",
    "version_to_score",
]

CI_METHOD = "wald-logit"
_NO_WARNINGS: tuple[str, ...] = ()
GROUP_COMMIT_MAX_ROWS = 1000  # bigger batches gain nothing from sharing a commit


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


def _inputs_json(data: ScoreInput, v: LoadedVersion, cols: Mapping[str, np.ndarray]) -> list[str]:
    """Each record's inputs (the columns the version uses) as a JSON object; categorical
    text as it was matched to the levels (``cols``: NFC), numbers as they were sent."""
    numeric = {nm for nm in v.inputs if v.kinds.get(nm, "numeric") != "categorical"}
    sent = {nm: cols[nm] if nm not in numeric else data.columns[nm] for nm in v.inputs}
    return inputs_json(sent, v.inputs, numeric)


@dataclass(frozen=True)
class ScoredBatch:
    """A batch scored but not yet logged: ``rows`` to commit, then ``answer()`` to build.

    ``answer()`` is the JSON-ready dict; ``answer_json()`` the same body as JSON bytes, built
    per column (:mod:`service.score_answer`).
    """

    rows: ScoreRows
    answer: Callable[[], dict[str, Any]]
    answer_json: Callable[[], bytes]


def prepare_batch(
    *,
    session: Session,
    model: RiskModel,
    data: Callable[[LoadedVersion], ScoreInput],
    version: int | None,
    confidence_level: float,
    explain: bool,
    cache: VersionCache,
    extrapolation_limit: float = DEFAULT_EXTRAPOLATION_LIMIT,
) -> ScoredBatch:
    """Score a batch (``data(v)`` gives the raw columns version ``v`` needs); nothing stored.

    The version (and the champion, when ``version`` is None) is read in ``session``. The
    caller commits ``rows`` and only then calls ``answer()`` (the JSON-ready body).
    """
    number = resolve_version(session, model, version)
    v = cache.get(session, model, number)
    return score_prepared(
        model=model,
        v=v,
        batch=data(v),
        confidence_level=confidence_level,
        explain=explain,
        extrapolation_limit=extrapolation_limit,
    )


def score_prepared(
    *,
    model: RiskModel,
    v: LoadedVersion,
    batch: ScoreInput,
    confidence_level: float,
    explain: bool,
    checks_champion: bool = False,
    extrapolation_limit: float = DEFAULT_EXTRAPOLATION_LIMIT,
) -> ScoredBatch:
    """Score ``batch`` with the decoded version ``v``: no store access at all.

    ``checks_champion``: ``v`` was taken as the champion without reading the store, so the
    commit must find it still the champion (:func:`service.score_writer.check_champion`).
    ``extrapolation_limit``: the guard of :mod:`service.score_guard` (0: off).
    """
    cols = {
        name: coerced(batch, name, kind, v.spellings.get(name)) for name, kind in v.kinds.items()
    }

    def where(name: str, i: int) -> tuple[str, Any]:
        return batch.field(name, i), batch.columns[name][i]

    check_columns(v.guard(extrapolation_limit), cols, where)
    offset = None
    if v.offset:
        offset = coerce_column(v.offset, "numeric", batch.columns[v.offset], namer(batch, v.offset))
    with np.errstate(over="ignore", invalid="ignore"):  # overflow: refused when predicted
        design = design_matrix(v.encoding, cols, field_prefix=batch.prefix)
    return _scored(
        model,
        v,
        _Designed(
            design.X,
            offset,
            batch.keys,
            lambda: warnings_of(batch.n, design.extrapolated, cols, v.ranges),
            where,
            batch.passthrough,
        ),
        lambda: _inputs_json(batch, v, cols),
        confidence_level=confidence_level,
        explain=explain,
        checks_champion=checks_champion,
    )


def score_record(
    *,
    model: RiskModel,
    v: LoadedVersion,
    record: Mapping[str, Any],
    confidence_level: float,
    explain: bool,
    checks_champion: bool = False,
    extrapolation_limit: float = DEFAULT_EXTRAPOLATION_LIMIT,
) -> ScoredBatch | None:
    """:func:`score_prepared` for one record through the version's compiled plan.

    The same rows and answer bytes as the general path (tests/api/test_score_record.py), or
    None when the plan leaves the record to the general path (which words any error).
    """
    d = v.record_plan.design(record)
    if d is None or (d.outside and v.guard(extrapolation_limit).exceeds(d.outside)):
        return None
    keys = record_keys([d.key], "records")
    extra = None
    if d.passthrough is not None:
        extra = [passthrough(d.passthrough, f"records[0].{PASSTHROUGH_FIELD}")]
    warnings = [[extrapolation_warning(n, x, v.ranges) for n, x in d.outside] or _NO_WARNINGS]

    def where(name: str, i: int) -> tuple[str, Any]:
        return f"records[{i}].{name}", record[name]

    designed = _Designed(d.X, d.offset, keys, lambda: warnings, where, extra)
    return _scored(
        model,
        v,
        designed,
        lambda: [d.inputs_json],
        confidence_level=confidence_level,
        explain=explain,
        checks_champion=checks_champion,
    )


@dataclass(frozen=True)
class _Designed:
    """A batch's design: ``X`` (n, p), the offset (n,) or None, the client keys (None: no
    record has one), ``warnings()``, each record's warning texts (extrapolation), ``where``
    (an input's field path and raw value, for errors) and each record's passthrough object
    (None: no record has one)."""

    X: np.ndarray
    offset: np.ndarray | None
    keys: list[str | None] | None
    warnings: Callable[[], list[Any]]
    where: Where
    passthrough: list[Passthrough] | None = None


def _scored(
    model: RiskModel,
    v: LoadedVersion,
    d: _Designed,
    inputs: Callable[[], list[str]],
    *,
    confidence_level: float,
    explain: bool,
    checks_champion: bool,
) -> ScoredBatch:
    """Predict ``d`` with ``v`` and build the log rows (``inputs()``: each record's JSON)."""
    number = v.number
    pred = checked_predict(
        d.X,
        v.encoding,
        v.coef,
        v.cov,
        offset=d.offset,
        offset_name=v.offset,
        confidence_level=confidence_level,
        where=d.where,
    )
    n = d.X.shape[0]
    ids = new_score_ids(n)
    created_at = datetime.now(UTC)
    eta, se, p = pred.eta.tolist(), pred.se_eta.tolist(), pred.probability.tolist()
    rows = ScoreRows(model, number, ids, d.keys, inputs(), eta, se, p, created_at, checks_champion)

    def header() -> dict[str, Any]:
        return {
            "model": model.name,
            "version": number,
            "confidence_level": confidence_level,
            "ci_method": CI_METHOD,
            "n_records": n,
            "created_at": created_at,
        }

    def answer() -> dict[str, Any]:
        warnings = d.warnings()
        keys = d.keys if d.keys is not None else [None] * n
        lo, hi = pred.ci_lower.tolist(), pred.ci_upper.tolist()
        scores = [
            dict(zip(ITEM_KEYS, t, strict=True))
            for t in zip(ids, keys, p, lo, hi, eta, se, warnings, strict=True)
        ]
        if d.passthrough is not None:
            for item, extra in zip(scores, d.passthrough, strict=True):
                item[PASSTHROUGH_FIELD] = extra
        if explain:
            contrib = contributions(d.X, v.coef).tolist()
            for item, row in zip(scores, contrib, strict=True):
                item["contributions"] = dict(zip(v.term_names, row, strict=True))
        return {**header(), "scores": scores}

    def answer_bytes() -> bytes:
        if explain:  # per-record contribution objects: the dict form
            return dumps(answer())
        warnings = d.warnings()
        numbers = (pred.probability, pred.ci_lower, pred.ci_upper, pred.eta, pred.se_eta)
        return answer_json(header(), ids, d.keys, numbers, warnings, d.passthrough)

    return ScoredBatch(rows, answer, answer_bytes)


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
    extrapolation_limit: float = DEFAULT_EXTRAPOLATION_LIMIT,
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
        extrapolation_limit=extrapolation_limit,
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
    extrapolation_limit: float = DEFAULT_EXTRAPOLATION_LIMIT,
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
        extrapolation_limit=extrapolation_limit,
    )
