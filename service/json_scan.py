"""The byte scan that lets large JSON bodies skip the structural-limit walk (service.limits).

:func:`may_exceed` answers "may this body break a structural limit?" without walking it in
Python, and never answers "no" wrongly: it scans the raw bytes with numpy (string spans
between unescaped quotes, bracket nesting outside strings; UTF-8 bytes and escapes are never
fewer than the characters they stand for, so a span within the limit holds a string within
it) and looks only at the lists the rules name (records, outcomes, training rows and columns,
features, levels). Small bodies always answer "yes": walking them is cheaper than the scan.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from service.config import Settings

__all__ = ["may_exceed"]

_WALK_BELOW_BYTES = 4096  # smaller bodies: the Python walk is cheaper than the byte scan
_QUOTE, _BACKSLASH = ord('"'), ord("\\")
_BRACKETS = b"[{]}"  # opening pair, closing pair


def _bytes_may_exceed(raw: bytes, max_str: int, max_depth: int) -> bool:
    """True unless every string span of ``raw`` is <= ``max_str`` bytes and nesting <= depth."""
    a = np.frombuffer(raw, dtype=np.uint8)
    quotes = np.flatnonzero(a == _QUOTE)
    if raw.find(b"\\") >= 0 and quotes.size:  # drop quotes escaped by an odd backslash run
        idx = np.arange(a.size)
        last_plain = np.maximum.accumulate(np.where(a != _BACKSLASH, idx, -1))
        before = quotes - 1
        run = np.where(before >= 0, before - last_plain[np.maximum(before, 0)], 0)
        quotes = quotes[run % 2 == 0]
    if quotes.size % 2:
        return True  # not a well-formed string sequence: let the walk decide
    if quotes.size and int((quotes[1::2] - quotes[0::2]).max()) - 1 > max_str:
        return True
    o1, o2, c1, c2 = _BRACKETS
    opens, closes = (a == o1) | (a == o2), (a == c1) | (a == c2)
    at = np.flatnonzero(opens | closes)
    outside = at[np.searchsorted(quotes, at) % 2 == 0]  # an even number of quotes before
    step = np.where(opens[outside], 1, -1)
    return bool(step.size) and int(np.cumsum(step).max()) > max_depth


def _lists_over(body: Any, s: Settings) -> bool:
    """True when a list that :func:`_list_limit` bounds holds more items than allowed."""
    if not isinstance(body, dict):
        return False

    def over(v: Any, limit: int) -> bool:
        return isinstance(v, list) and len(v) > limit

    if over(body.get("records"), s.max_records_per_request):
        return True
    if over(body.get("outcomes"), s.max_records_per_request):
        return True
    data = body.get("data")
    if isinstance(data, dict):
        if over(data.get("rows"), s.max_json_fit_rows):
            return True
        cols = data.get("columns")
        items = cols.values() if isinstance(cols, dict) else cols if isinstance(cols, list) else ()
        if any(over(c, s.max_json_fit_rows) for c in items):
            return True
    features = body.get("features")
    if over(features, s.max_features):
        return True
    items = (
        features.values()
        if isinstance(features, dict)
        else features
        if isinstance(features, list)
        else ()
    )
    return any(isinstance(f, dict) and over(f.get("levels"), s.max_levels) for f in items)


def may_exceed(raw: bytes, body: Any, settings: Settings) -> bool:
    """Whether ``body`` (parsed from ``raw``) may break a structural limit (no false 'no')."""
    if len(raw) < _WALK_BELOW_BYTES:
        return True
    return _lists_over(body, settings) or _bytes_may_exceed(
        raw, settings.max_string_length, settings.max_json_depth
    )
