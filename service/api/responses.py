"""Fast JSON responses.

FastAPI 0.165 deprecates its own ``ORJSONResponse`` (and the test suite turns
warnings into errors), so riskfit keeps a three-line equivalent: routes that
return big numeric payloads (score batches) build a plain dict of floats or
numpy arrays and hand it to :class:`JSONBytes`, bypassing per-record pydantic
models. Typed routes use FastAPI's own pydantic-to-bytes serialisation.
"""

from __future__ import annotations

from typing import Any

import orjson
from starlette.responses import JSONResponse

__all__ = ["JSONBytes", "dumps"]

_OPTIONS = orjson.OPT_SERIALIZE_NUMPY | orjson.OPT_NON_STR_KEYS | orjson.OPT_UTC_Z


def dumps(content: Any) -> bytes:
    """orjson with numpy arrays, non-string keys and ``Z`` for UTC datetimes."""
    return orjson.dumps(content, option=_OPTIONS)


class JSONBytes(JSONResponse):
    """A JSON response rendered by orjson (NaN/inf become ``null``, as orjson does)."""

    def render(self, content: Any) -> bytes:
        return dumps(content)
