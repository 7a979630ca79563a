"""``POST /risk-models/{model}/scores``: probabilities with intervals, logged before answering.

The body is parsed once with orjson from the raw bytes; only the options go through pydantic
(:class:`ScoreOptions`), the data (``records`` or ``columns``) are validated as arrays by the
scoring operation. The documented body is :class:`ScoreCreate`.

Where it runs: a small body (up to :data:`_INLINE_MAX_BYTES`, a few records) on a SQLite store
is read, scored and handed to the group-commit writer on the event loop, which then awaits the
commit without holding a thread (the store read is in-process, a fraction of a millisecond; a
thread hop and the GIL hand-over cost more). Anything else, and every PostgreSQL request (a
network round trip), takes one worker-thread hop. Either way the answer exists only after the
score-log rows are committed.
"""

from __future__ import annotations

import asyncio
import json
from typing import Any, NoReturn

import orjson
from fastapi import APIRouter, Request
from fastapi.exceptions import RequestValidationError
from pydantic import ValidationError
from starlette.concurrency import run_in_threadpool

from service.api.deps import ModelName, ScorerAccess, SessionDep, SettingsDep
from service.api.responses import JSONBytes
from service.errors import DataError
from service.limits import JSON_SCOPE_KEY
from service.schemas import ErrorResponse, ScoreBatchPublic, ScoreCreate
from service.schemas.scores import ScoreOptions
from service.score_writer import writer_of
from service.scoring import (
    LoadedVersion,
    ScoredBatch,
    ScoreInput,
    columns_input,
    log_batch,
    prepare_batch,
    records_input,
    scoring_model,
    version_to_score,
)

router = APIRouter(prefix="/risk-models/{model}/scores", tags=["scores"])

_BODY_SCHEMA = ScoreCreate.model_json_schema(ref_template="#/components/schemas/{model}")
_INLINE_MAX_BYTES = 4096  # SQLite and a body this small: scored on the event loop (a few ms)
_LAYOUT_REMEDY = 'send {"records": [{...}, ...]} or {"columns": {"feature": [...], ...}}'


def _lenient_json(raw: bytes) -> Any:
    """Python's own parser, which also reads ``NaN`` and ``Infinity`` (orjson refuses them)."""
    try:
        return json.loads(raw)
    except (ValueError, UnicodeDecodeError) as exc:
        raise DataError(
            f"the body is not valid JSON: {str(exc)[:120]}",
            field="body",
            value=None,
            remedy=_LAYOUT_REMEDY,
        ) from exc


_UNPARSED = object()


def _parse(raw: bytes, parsed: Any = _UNPARSED) -> tuple[ScoreOptions, Any, bool]:
    """(options, data, is_columns) from the raw body (or its ``parsed`` value); 422 if malformed."""
    if parsed is not _UNPARSED:
        body = parsed  # parsed once already, by the limits middleware
    else:
        try:
            body = orjson.loads(raw)
        except orjson.JSONDecodeError:
            body = _lenient_json(raw)  # NaN / Infinity literals: refused later, naming the cell
    if not isinstance(body, dict):
        raise DataError(
            "the body must be a JSON object", field="body", value=None, remedy=_LAYOUT_REMEDY
        )
    records, columns = body.pop("records", None), body.pop("columns", None)
    try:
        options = ScoreOptions.model_validate(body)
    except ValidationError as exc:
        raise RequestValidationError(
            [{**e, "loc": ("body", *e["loc"])} for e in exc.errors(include_url=False)]
        ) from exc
    if (records is None) == (columns is None):
        _invalid(("records",), "give exactly one of records or columns", None)
    if records is not None:
        if not isinstance(records, list) or not records:
            _invalid(("records",), "records must be a non-empty list of objects", records)
        for i, r in enumerate(records):
            if not isinstance(r, dict):
                _invalid(("records", i), "a record must be a JSON object", r)
        # A nested value needs a bracket of its own: when the body has no more brackets than
        # its structure, nothing is nested (a bracket inside a string only costs the scan).
        if raw.count(b"[") > 1 or raw.count(b"{") > len(records) + 1:
            for i, r in enumerate(records):
                _refuse_nested(r, lambda name, i=i: ("records", i, name))
        return options, records, False
    if not isinstance(columns, dict) or not columns:
        _invalid(("columns",), "columns must be an object of lists, one per feature", columns)
    nested = raw.count(b"[") > len(columns) or raw.count(b"{") > 2
    for name, col in columns.items():
        if not isinstance(col, list):
            _invalid(("columns", name), "a column must be a list of values", col)
        if not nested:
            continue
        bad = next((j for j, v in enumerate(col) if isinstance(v, list | dict)), None)
        if bad is not None:
            _invalid(("columns", name, bad), "values must be numbers, strings or null", col[bad])
    return options, columns, True


def _refuse_nested(record: dict[str, Any], loc: Any) -> None:
    for name, v in record.items():
        if isinstance(v, list | dict):
            _invalid(loc(name), "values must be numbers, strings or null", v)


def _invalid(loc: tuple[str | int, ...], message: str, value: Any) -> NoReturn:
    """Refuse the body's structure as pydantic would (code ``invalid_request``, 422)."""
    raise RequestValidationError(
        [{"type": "value_error", "loc": ("body", *loc), "msg": message, "input": value}]
    )


@router.post(
    "",
    response_model=ScoreBatchPublic,
    summary="Score records with the champion (or a given version)",
    responses={409: {"model": ErrorResponse, "description": "A record key is already used."}},
    openapi_extra={
        "requestBody": {
            "required": True,
            "content": {"application/json": {"schema": _BODY_SCHEMA}},
        }
    },
)
async def post_scores(
    model: ModelName,
    session: SessionDep,
    settings: SettingsDep,
    request: Request,
    _: ScorerAccess,
) -> JSONBytes:
    raw = await request.body()
    parsed = request.scope.pop(JSON_SCOPE_KEY, _UNPARSED)
    state = request.app.state
    writer = writer_of(state)

    def prepare() -> ScoredBatch:  # store read (404 before the body), parse, score
        found, champion = scoring_model(session=session, name=model)
        options, data, is_columns = _parse(raw, parsed)

        def batch(v: LoadedVersion) -> ScoreInput:
            return columns_input(data, v.inputs) if is_columns else records_input(data, v.inputs)

        return prepare_batch(
            session=session,
            model=found,
            data=batch,
            version=version_to_score(found, options.version, champion),
            confidence_level=options.confidence_level or settings.default_confidence_level,
            explain=options.explain,
            cache=state.version_cache,
        )

    if len(raw) <= _INLINE_MAX_BYTES and state.engine.dialect.name == "sqlite":
        scored = prepare()  # an in-process read and a few records: cheaper than a thread hop
        session.commit()  # ends the read transaction (SQLite: no I/O wait)
        await asyncio.wrap_future(writer.submit(scored.rows))  # durable before the answer
        answer = scored.answer()
    else:

        def work() -> dict[str, Any]:  # one worker-thread hop: store read, score, log
            scored = prepare()
            log_batch(session, scored.rows, writer)  # durable before the answer
            return scored.answer()

        answer = await run_in_threadpool(work)
    state.metrics.records_scored.labels(model).inc(answer["n_records"])
    return JSONBytes(answer)
