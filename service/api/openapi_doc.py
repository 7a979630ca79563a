"""The OpenAPI document as served: FastAPI's, completed so that it describes what is enforced.

:func:`install_openapi` replaces ``app.openapi`` with a builder that takes FastAPI's document
and then

* registers every schema a route references by hand (``openapi_extra``, e.g. the JSON fit
  body ``#/components/schemas/VersionCreate``) but FastAPI did not emit: the model of that
  name in :mod:`service.schemas`, with its own nested models;
* sets ``maxItems`` of the batch lists (``records`` of a score request, ``outcomes``) to the
  enforced limit, the setting ``max_records_per_request`` of *this* app (413/422 beyond);
* documents the ``503`` of an unavailable store on every operation (the handler in
  :mod:`service.api.errors` serves it for any route).

A method a path does not serve is ``405`` with ``Allow`` listing every method the path
serves (:mod:`service.api.errors`); OpenAPI describes operations, not absent ones.

The result is cached per app, like FastAPI's own.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi
from pydantic import BaseModel

import service.schemas as schemas
from service.config import Settings

__all__ = ["dangling_refs", "install_openapi"]

_PREFIX = "#/components/schemas/"
_METHODS = ("get", "put", "post", "delete", "patch", "head", "options", "trace")
_ERROR = {"$ref": f"{_PREFIX}ErrorResponse"}
_SHARED_RESPONSES: dict[str, str] = {
    "503": "The database did not answer; nothing was changed (`Retry-After` says when to retry).",
}


def _refs(node: Any) -> Iterator[str]:
    """Every ``$ref`` string anywhere under ``node``."""
    stack = [node]
    while stack:
        item = stack.pop()
        if isinstance(item, dict):
            ref = item.get("$ref")
            if isinstance(ref, str):
                yield ref
            stack.extend(item.values())
        elif isinstance(item, list):
            stack.extend(item)


def dangling_refs(doc: dict[str, Any]) -> set[str]:
    """Local ``$ref`` targets of ``doc`` that do not exist in it (an invalid document)."""
    missing = set()
    for ref in _refs(doc):
        if not ref.startswith("#/"):
            continue
        node: Any = doc
        for part in ref[2:].split("/"):
            part = part.replace("~1", "/").replace("~0", "~")
            if not isinstance(node, dict) or part not in node:
                missing.add(ref)
                break
            node = node[part]
    return missing


def _register_missing(doc: dict[str, Any]) -> None:
    components = doc.setdefault("components", {}).setdefault("schemas", {})
    for _ in range(5):  # a registered model may itself reference others
        missing = {r[len(_PREFIX) :] for r in dangling_refs(doc) if r.startswith(_PREFIX)}
        if not missing:
            return
        for name in sorted(missing):
            model = getattr(schemas, name, None)
            if not (isinstance(model, type) and issubclass(model, BaseModel)):
                continue
            schema = model.model_json_schema(ref_template=_PREFIX + "{model}", mode="validation")
            for def_name, definition in schema.pop("$defs", {}).items():
                components.setdefault(def_name, definition)
            components[name] = schema


def _json_bodies(doc: dict[str, Any]) -> Iterator[dict[str, Any]]:
    """The schema of every JSON request body (a component's, when referenced)."""
    comps = doc.get("components", {}).get("schemas", {})
    for item in doc.get("paths", {}).values():
        for method in (m for m in item if m in _METHODS):
            content = item[method].get("requestBody", {}).get("content", {})
            schema = content.get("application/json", {}).get("schema")
            if isinstance(schema, dict) and schema.get("$ref", "").startswith(_PREFIX):
                schema = comps.get(schema["$ref"][len(_PREFIX) :])
            if isinstance(schema, dict):
                yield schema


def _set_max_items(doc: dict[str, Any], settings: Settings) -> None:
    limit = settings.max_records_per_request
    note = (
        f" At most {limit} items (setting `RISKFIT_MAX_RECORDS_PER_REQUEST`; 422 naming the list "
        "beyond it)."
    )
    for body in _json_bodies(doc):
        for field in ("records", "outcomes"):  # the lists service.limits bounds by the setting
            prop = body.get("properties", {}).get(field)
            if prop is None or note in prop.get("description", ""):
                continue
            for array in (s for s in prop.get("anyOf", [prop]) if s.get("type") == "array"):
                array["maxItems"] = limit
            prop["description"] = (prop.get("description") or "") + note


def _document_shared_answers(doc: dict[str, Any]) -> None:
    for item in doc.get("paths", {}).values():
        for method in (m for m in item if m in _METHODS):
            responses = item[method].setdefault("responses", {})
            for code, text in _SHARED_RESPONSES.items():
                content = {"application/json": {"schema": _ERROR}}
                responses.setdefault(code, {"description": text, "content": content})


def install_openapi(app: FastAPI, settings: Settings) -> None:
    """Serve the completed document (module docstring) from ``/openapi.json``."""

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            doc = get_openapi(
                title=app.title,
                version=app.version,
                openapi_version=app.openapi_version,
                description=app.description,
                routes=app.routes,
                tags=app.openapi_tags,
                servers=app.servers,
            )
            _register_missing(doc)
            _set_max_items(doc, settings)
            _document_shared_answers(doc)
            app.openapi_schema = doc
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]
