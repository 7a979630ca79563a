"""``POST /risk-models/{model}/scores``: probabilities with intervals, logged before answering.

The body is parsed once with orjson from the raw bytes; only the options go through pydantic
(:class:`ScoreOptions`), the data (``records`` or ``columns``) are validated as arrays by the
scoring operation. The documented body is :class:`ScoreCreate`.

The request takes no session: the model, champion and version come from memory and the
score log is written by the group-commit writer (:mod:`service.score_serving`); the answer
exists only after the score-log rows are committed.

The route is a :class:`ScoreRoute`: it runs the checks its signature declares (the key and
role, then the model name) itself instead of through FastAPI's dependency solving, which
cost about 80 us of a single-record score's 440 us in process
(tests/benchmarks/bench_scoring.py). The signature stays the documented contract: the
OpenAPI document and the role lookup of :func:`service.security.authenticate_first` read it.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Coroutine
from itertools import repeat
from typing import Any, NoReturn

import orjson
from fastapi import APIRouter, Request, Response
from fastapi.exceptions import RequestValidationError
from fastapi.routing import APIRoute
from pydantic import TypeAdapter, ValidationError

from service.api.deps import ModelName, ScorerAccess, require_role
from service.errors import DataError
from service.limits import JSON_SCOPE_KEY
from service.schemas import ErrorResponse, ScoreBatchPublic, ScoreCreate
from service.schemas.scores import ScoreOptions
from service.score_input import PASSTHROUGH_FIELD
from service.score_serving import serve_scores


class ScoreRoute(APIRoute):
    """An :class:`APIRoute` whose handler checks access and the model name directly.

    Same order and same errors as FastAPI's solving of the endpoint's dependencies: the key
    check first (401 for a missing, unknown or revoked key, 403 without the scorer role, or
    ``app.state.access_checker`` where tests install one), then ``{model}`` against
    :data:`~service.api.deps.ModelName` (422 at ``path.model``). The endpoint reads its body
    itself and returns a :class:`Response`, so nothing else of FastAPI's handler applies.
    """

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        endpoint = self.endpoint
        admit = require_role("scorer")

        async def handler(request: Request) -> Response:
            principal = await admit(request)
            model = _model_name(request.path_params["model"])
            response: Response = await endpoint(model, request, principal)
            return response

        return handler


_MODEL_NAME: TypeAdapter[str] = TypeAdapter(ModelName)


def _model_name(value: str) -> str:
    """``value`` if it is a valid model name, else the 422 FastAPI gives for a path parameter."""
    try:
        return _MODEL_NAME.validate_python(value)
    except ValidationError as exc:
        raise RequestValidationError(
            [{**e, "loc": ("path", "model", *e["loc"])} for e in exc.errors(include_url=False)]
        ) from exc


router = APIRouter(prefix="/risk-models/{model}/scores", tags=["scores"], route_class=ScoreRoute)

_BODY_SCHEMA = ScoreCreate.model_json_schema(ref_template="#/components/schemas/{model}")
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
        if not all(map(isinstance, records, repeat(dict))):  # one C-level pass when all are
            i, r = next((i, r) for i, r in enumerate(records) if not isinstance(r, dict))
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
        kinds = list if name == PASSTHROUGH_FIELD else list | dict  # passthrough: objects
        bad = next((j for j, v in enumerate(col) if isinstance(v, kinds)), None)
        if bad is not None:
            _invalid(("columns", name, bad), "values must be numbers, strings or null", col[bad])
    return options, columns, True


def _refuse_nested(record: dict[str, Any], loc: Any) -> None:
    for name, v in record.items():
        if isinstance(v, list) or (isinstance(v, dict) and name != PASSTHROUGH_FIELD):
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
async def post_scores(model: ModelName, request: Request, _: ScorerAccess) -> Response:
    raw = await request.body()
    parsed = request.scope.pop(JSON_SCOPE_KEY, _UNPARSED)
    state = request.app.state
    n, body = await serve_scores(
        state=state, name=model, body_bytes=len(raw), parse=lambda: _parse(raw, parsed)
    )
    state.metrics.scored(model, n)
    return Response(content=body, media_type="application/json")  # JSON built per column
