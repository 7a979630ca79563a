"""The byte scan of large JSON bodies (service.limits.may_exceed) never misses a body that the
full walk (check_json_body) refuses, so the fast path keeps every limit and error message."""

from __future__ import annotations

import json

from hypothesis import given, settings
from hypothesis import strategies as st

from service.config import Settings
from service.errors import RiskfitError
from service.limits import check_json_body, may_exceed

LIMITS = Settings(
    max_string_length=64,
    max_json_depth=4,
    max_records_per_request=5,
    max_features=3,
    max_levels=3,
    max_json_fit_rows=5,
)
KEYS = st.sampled_from(["records", "outcomes", "data", "rows", "columns", "features", "levels"])
TEXT = st.text(alphabet='ab"\\[]{}\u00e9\U0001f600', max_size=80)
JSON = st.recursive(
    st.none() | st.integers(-5, 5) | TEXT,
    lambda inner: st.lists(inner, max_size=7) | st.dictionaries(KEYS | TEXT, inner, max_size=5),
    max_leaves=40,
)
PAD = b" " * 5000  # above the size where the walk is skipped


@settings(max_examples=400, deadline=None)
@given(body=JSON, ascii_only=st.booleans())
def test_scan_flags_every_body_the_walk_refuses(body: object, ascii_only: bool) -> None:
    raw = json.dumps(body, ensure_ascii=ascii_only).encode() + PAD
    try:
        check_json_body(body, LIMITS)
    except RiskfitError:
        assert may_exceed(raw, body, LIMITS)


def test_a_plain_large_batch_is_not_walked() -> None:
    body = {"records": [{"age": 1.5, "material": "cast iron"}] * 5}
    raw = json.dumps(body).encode() + PAD
    assert not may_exceed(raw, body, LIMITS)
    deep = {"records": [[[[[1]]]]]}
    assert may_exceed(json.dumps(deep).encode() + PAD, deep, LIMITS)
    long = {"records": ["x" * 65]}
    assert may_exceed(json.dumps(long).encode() + PAD, long, LIMITS)
