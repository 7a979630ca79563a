"""The score-log append process: ``python -m service.score_log_child DB BUSY_MS SYNCHRONOUS``.

Started by :class:`service.score_log_channel.ScoreLogChannel` next to a server process that
serves a SQLite file. It reads requests' score rows on standard input and appends them, many
requests to a statement (:func:`models_store.score_append.append_requests`), then answers on
standard output, one line per statement, once the statement has committed. Being another
process, its driver calls never wait for the server's GIL and the server's event loop never
shares a CPU cache line with it.

Frames in: a 4-byte little-endian length, then the orjson array ``[seq, rows]`` (``rows`` the
request's :data:`~models_store.score_append.FreshRows` as arrays). Lines out: an orjson array
of ``[seq, code, value]``: code 0 stored; 1 refused, the champion changed (value
``[model_id, champion or null]``); 2 not stored, the store failed (value: the driver's
message); 3 not stored, the server must take its session path (a foreign key, an unexpected
error; value: the message). The first line, ``[]``, says the child is connected to the
store. End of input: finish what was read, close, exit 0.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import struct
import sys
from collections.abc import Iterator
from typing import Any

import orjson

from models_store.db import apply_sqlite_pragmas
from models_store.score_append import APPEND_MAX_ROWS, FreshRows, append_requests

__all__ = ["main", "serve"]

_HEADER = struct.Struct("<I")
_Request = tuple[int, list[FreshRows]]


def _frames(buffer: bytearray) -> Iterator[_Request]:
    """Complete frames at the start of ``buffer`` (consumed from it)."""
    at = 0
    while len(buffer) - at >= 4:
        (size,) = _HEADER.unpack_from(buffer, at)
        if len(buffer) - at - 4 < size:
            break
        seq, rows = orjson.loads(bytes(buffer[at + 4 : at + 4 + size]))
        at += 4 + size
        yield int(seq), [tuple(r) for r in rows]
    del buffer[:at]


def _groups(requests: list[_Request]) -> Iterator[list[_Request]]:
    """``requests`` in order, cut where a statement would pass APPEND_MAX_ROWS rows."""
    group: list[_Request] = []
    size = 0
    for request in requests:
        n = len(request[1])
        if group and size + n > APPEND_MAX_ROWS:
            yield group
            group, size = [], 0
        group.append(request)
        size += n
    if group:
        yield group


def _answer(conn: sqlite3.Connection, group: list[_Request]) -> list[list[Any]]:
    seqs = [seq for seq, _ in group]
    try:
        _, refused = append_requests(conn.cursor(), [rows for _, rows in group])
    except sqlite3.OperationalError as error:  # busy past the timeout, disk, schema
        return [[seq, 2, str(error)] for seq in seqs]
    except Exception as error:  # anything else: the server's session path words it
        return [[seq, 3, f"{type(error).__name__}: {error}"] for seq in seqs]
    out: list[list[Any]] = []
    for i, seq in enumerate(seqs):
        if i in refused:
            out.append([seq, 1, [group[i][1][0][1], refused[i]]])
        else:
            out.append([seq, 0, None])
    return out


def serve(conn: sqlite3.Connection, read_fd: int, write_fd: int) -> None:
    """Append what arrives on ``read_fd`` and answer on ``write_fd`` until end of input."""
    buffer = bytearray()
    while True:
        chunk = os.read(read_fd, 1 << 20)
        if not chunk:
            return
        buffer += chunk
        requests = list(_frames(buffer))
        for group in _groups(requests):
            line = orjson.dumps(_answer(conn, group)) + b"\n"
            view = memoryview(line)
            while view:
                view = view[os.write(write_fd, view) :]


def main(argv: list[str]) -> int:
    path, busy_ms, synchronous = argv[0], int(argv[1]), argv[2]
    # Ctrl-C in a terminal and a service manager's SIGTERM reach the whole process group: the
    # child lives exactly as long as its input, so that what its server sent is committed.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
    try:
        apply_sqlite_pragmas(conn, busy_ms, synchronous)
        os.write(sys.stdout.fileno(), b"[]\n")  # ready: an answer line with no answers
        serve(conn, sys.stdin.fileno(), sys.stdout.fileno())
    finally:
        conn.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
