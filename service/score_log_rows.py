"""Score-log row contents built in bulk: time-ordered score ids and each record's inputs JSON."""

from __future__ import annotations

import os
import time
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import orjson

__all__ = ["inputs_json", "new_score_ids"]

_GROUPS = ((0, 8, 0), (9, 13, 8), (14, 18, 12), (19, 23, 16), (24, 36, 20))  # text <- hex at
_FEW_IDS = 16


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
    raw = np.sort(raw.view("S16").ravel())
    hexed = np.frombuffer(raw.tobytes().hex().encode("ascii"), dtype=np.uint8).reshape(n, 32)
    text = np.full((n, 36), ord("-"), dtype=np.uint8)
    for start, stop, at in _GROUPS:  # 8-4-4-4-12 hex digits between the dashes
        text[:, start:stop] = hexed[:, at : at + stop - start]
    whole = text.tobytes().decode("ascii")
    return [whole[i : i + 36] for i in range(0, 36 * n, 36)]


def _uuid7_text(ms: int) -> str:
    b = bytearray(ms.to_bytes(6, "big") + os.urandom(10))
    b[6] = (b[6] & 0x0F) | 0x70
    b[8] = (b[8] & 0x3F) | 0x80
    h = b.hex()
    return f"{h[:8]}-{h[8:12]}-{h[12:16]}-{h[16:20]}-{h[20:]}"


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


def inputs_json(
    columns: Mapping[str, Sequence[Any] | np.ndarray], names: Sequence[str], numeric: set[str]
) -> list[str]:
    """Each record's ``names`` (``numeric`` ones as numbers) as a JSON object, built per column.

    Record ``i`` is ``'{"a":' + a[i] + ',"b":' + b[i] + '}'`` joined from the columns' texts
    (one ``str.join`` per record: about twice as fast as a ``%`` template for 10,000).
    """
    n = len(columns[names[0]]) if names else 0
    parts: list[Sequence[str]] = []
    for j, nm in enumerate(names):
        parts += [[("{" if j == 0 else ",") + orjson.dumps(nm).decode() + ":"] * n]
        parts += [_json_pieces(columns[nm], nm in numeric)]
    parts += [["}" if names else "{}"] * n]
    return list(map("".join, zip(*parts, strict=True)))
