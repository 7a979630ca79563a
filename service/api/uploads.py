"""Read a ``multipart/form-data`` fit body, keeping an upload of moderate size in memory.

Starlette spools each file part to a temporary file and, once that file is on disk, hands
every chunk written to it to a worker thread (one thread hop per 64 KiB received). A file
part of up to :data:`IN_MEMORY_BYTES` stays in memory here, so receiving it costs no hops
and no disk writes (a 30 MiB CSV: about 0.1 s less); larger parts are spooled as before.
A malformed body is a :class:`~service.errors.DataError` naming the body.
"""

from __future__ import annotations

from contextlib import aclosing

from starlette.datastructures import FormData
from starlette.formparsers import MultiPartException, MultiPartParser
from starlette.requests import Request

from service.errors import DataError

__all__ = ["IN_MEMORY_BYTES", "read_multipart"]

IN_MEMORY_BYTES = 64 * 2**20  # larger file parts go to a temporary file
_MAX_PARTS = 10  # a fit has two parts (spec, data); more than this is not a fit body


class _InMemoryParts(MultiPartParser):
    spool_max_size = IN_MEMORY_BYTES


async def read_multipart(request: Request) -> FormData:
    """The parts of the request's multipart body (close the form when done with it)."""
    content_type = request.headers.get("content-type", "")
    try:
        async with aclosing(request.stream()) as stream:
            parser = _InMemoryParts(
                request.headers, stream, max_files=_MAX_PARTS, max_fields=_MAX_PARTS
            )
            return await parser.parse()
    except MultiPartException as exc:  # malformed multipart: the client's input
        raise DataError(
            f"the multipart body cannot be read ({exc.message})",
            field="body",
            value=content_type,
            remedy="send a well-formed multipart/form-data body with a boundary, "
            "e.g. curl -F spec=@spec.json -F data=@segments.csv",
        ) from exc
