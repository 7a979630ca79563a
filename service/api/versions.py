"""Versions: ``POST /risk-models/{model}/versions`` (fit), ``GET .../versions[/{n}]``.

The fit accepts ``application/json`` (:class:`~service.schemas.VersionCreate`) or
``multipart/form-data`` with a JSON part ``spec`` (:class:`~service.schemas.VersionSpec`) and
a file part ``data`` (CSV with a header row, or Parquet).

A successful fit answers with a ``Server-Timing`` header (W3C Server Timing: milliseconds per
step, ``read, validate, encode, fit, inference, summaries, store``; see
:mod:`service.step_times`), for profiling from the client side; it is not part of the schema.

Its answer is built and validated before the version is committed (the same
:func:`~service.version_answer.version_answer` the GET uses), and returned as built: a stored
version always has an answer, and a fit that answered 201 can always be read back.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Path, Request, Response, status
from fastapi.exceptions import RequestValidationError
from pydantic import ValidationError
from starlette.concurrency import run_in_threadpool
from starlette.datastructures import UploadFile

from models_store.champions import current_champion
from models_store.orm import ModelVersion
from models_store.versions import list_versions, require_version
from service.api.deps import (
    ModelDep,
    ModelerAccess,
    ModelName,
    ScorerAccess,
    SessionDep,
    SettingsDep,
)
from service.api.uploads import read_multipart
from service.data_io import (
    ReadLimits,
    columns_from_rows,
    read_table,
    table_columns,
    training_data,
)
from service.errors import DataError
from service.fitting import fit_version, needed_columns
from service.limits import check_training_data
from service.schemas import ErrorResponse, VersionCreate, VersionList, VersionPublic, VersionSpec
from service.schemas.versions import _EXAMPLE_SPEC
from service.step_times import StepTimes
from service.version_answer import version_answer, version_public

__all__ = ["router", "version_public"]

router = APIRouter(prefix="/risk-models/{model}/versions", tags=["versions"])

VersionNumber = Path(ge=1, le=2_147_483_647, description="Version number (1, 2, ...).")


def _validated(schema: type[VersionSpec], raw: bytes | str) -> Any:
    try:
        return schema.model_validate_json(raw)
    except ValidationError as exc:
        raise RequestValidationError(exc.errors(include_url=False)) from None


async def _parse_fit_request(request: Request) -> tuple[VersionSpec, dict[str, Any], str]:
    """Spec and raw columns from a JSON or multipart body, and the data layout."""
    content_type = request.headers.get("content-type", "")
    if content_type.startswith("multipart/form-data"):
        form = await read_multipart(request)
        try:
            spec_part, data_part = form.get("spec"), form.get("data")
            if spec_part is None or not isinstance(data_part, UploadFile):
                raise DataError(
                    "a multipart fit needs a JSON part 'spec' and a file part 'data'",
                    field="spec" if spec_part is None else "data",
                    value=None,
                    remedy="send -F spec=@spec.json -F data=@segments.csv (or .parquet)",
                )
            spec_raw = await spec_part.read() if isinstance(spec_part, UploadFile) else spec_part
            content = await data_part.read()
            filename, upload_type = data_part.filename, data_part.content_type
        finally:
            await form.close()  # the spooled upload files
        spec = _validated(VersionSpec, spec_raw)
        categorical = [f.name for f in spec.features if f.kind == "categorical"]
        table = read_table(
            content,
            filename=filename,
            content_type=upload_type,
            categorical=categorical,
            columns=needed_columns(spec),  # only these are decoded, within the read limits
            limits=ReadLimits.from_settings(request.app.state.settings),
        )
        return spec, table_columns(table, needed_columns(spec)), "columns"
    body: VersionCreate = _validated(VersionCreate, await request.body())
    if body.data.path is not None:
        return body, {}, "path"
    if body.data.rows is not None:
        rows = columns_from_rows(body.data.rows, needed_columns(body), "data.rows")
        return body, dict(rows), "rows"
    return body, dict(body.data.columns or {}), "columns"


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=VersionPublic,
    summary="Fit a new version from data and a feature spec",
    responses={409: {"model": ErrorResponse, "description": "Concurrent fit took the number."}},
    openapi_extra={
        "requestBody": {
            "required": True,
            "content": {
                "application/json": {
                    "schema": {"$ref": "#/components/schemas/VersionCreate"},
                },
                "multipart/form-data": {
                    "schema": {
                        "type": "object",
                        "required": ["spec", "data"],
                        "properties": {
                            "spec": {
                                "type": "string",
                                "description": "VersionSpec as JSON",
                                "example": _EXAMPLE_SPEC,
                            },
                            "data": {"type": "string", "format": "binary"},
                        },
                    }
                },
            },
        }
    },
)
async def post_version(
    model: ModelName,
    request: Request,
    response: Response,
    session: SessionDep,
    settings: SettingsDep,
    who: ModelerAccess,
) -> VersionPublic:
    times = StepTimes()
    spec, raw, layout = await _parse_fit_request(request)
    times.lap("read")
    options = spec.options
    kinds = {f.name: f.kind for f in spec.features}

    def work() -> tuple[VersionPublic, float]:
        if layout == "path":
            return _fit_from_path(session, settings, model, spec, who.key_id)
        data = training_data(
            raw,
            kinds=kinds,
            outcome=spec.outcome,
            weights=options.weights,
            offset=options.offset,
            layout=layout,
        )
        check_training_data(settings, kinds, data.level_columns(), data.n_obs)
        times.lap("validate")
        level = options.confidence_level or settings.default_confidence_level
        _, v, answer = fit_version(
            session=session,
            model_name=model,
            spec=spec,
            data=data,
            confidence_level=level,
            settings=settings,
            key_id=who.key_id,
            times=times,
        )
        return answer, float(v.fit_stats.get("fit_seconds", 0.0))

    answer, seconds = await run_in_threadpool(work)
    response.headers["Server-Timing"] = times.header()
    metrics = request.app.state.metrics
    metrics.versions_fitted.labels(model, options.method).inc()
    metrics.fit_seconds.observe(seconds)
    return answer  # already validated: FastAPI passes a model instance through as it is


def _fit_from_path(
    session: Any, settings: Any, model: str, body: Any, key_id: int | None
) -> tuple[VersionPublic, float]:
    """``data.path``: stream a server-side file (service/sources), or fit on Dask."""
    from service.sources.fit_path import fit_version_from_path

    _, v, answer = fit_version_from_path(
        session=session,
        settings=settings,
        model_name=model,
        spec=VersionSpec.model_validate(body.model_dump(exclude={"data"})),
        path=body.data.path,
        confidence_level=body.options.confidence_level or settings.default_confidence_level,
        engine=body.data.engine,
        scheduler=body.data.scheduler,
        key_id=key_id,
    )
    return answer, float(v.fit_stats.get("fit_seconds", 0.0))


def _summary(v: ModelVersion, champion: int | None) -> dict[str, Any]:
    return {
        "number": v.number,
        "created_at": v.created_at,
        "method": v.method,
        "n_obs": v.n_obs,
        "n_events": v.n_events,
        "origin": v.origin,
        "parent": v.parent_number,
        "is_champion": v.number == champion,
        "note": v.note or None,
    }


@router.get("", response_model=VersionList, summary="Versions of a model")
def get_versions(model: ModelDep, session: SessionDep, _: ScorerAccess) -> dict[str, Any]:
    champion = current_champion(session=session, model=model)
    items = [_summary(v, champion) for v in list_versions(session=session, model=model)]
    return {"model": model.name, "items": items, "count": len(items)}


@router.get("/{number}", response_model=VersionPublic, summary="One version in full")
def get_version(
    model: ModelDep, session: SessionDep, _: ScorerAccess, number: int = VersionNumber
) -> VersionPublic:
    v = require_version(session=session, model=model, number=number)
    return version_answer(session, model, v)
