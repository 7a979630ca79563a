"""Refused date-times for tests/api/test_bad_input.py (the shape of
tests/api/_bad_input_cases.py): near year 1 / 9999 with an offset (was a 500), numbers (were
taken for Unix times), an outcome observed in the future."""

from __future__ import annotations

from typing import Any

OUTCOMES = "/risk-models/water-mains/outcomes"
Y1, Y9999 = "0001-01-01T00:00:00+05:00", "9999-12-31T23:59:59-05:00"

DATE_CASES: list[tuple[str, str, str, Any, int, str, str | None, Any]] = [
    (
        "outcome-observed-at-year-9999",
        "POST",
        OUTCOMES,
        {"json": {"outcomes": [{"key": "k", "outcome": 1, "observed_at": Y9999}]}},
        422,
        "invalid_request",
        "outcomes[0].observed_at",
        Y9999,
    ),
    (
        "outcome-observed-in-the-future",
        "POST",
        OUTCOMES,
        {"json": {"outcomes": [{"key": "k", "outcome": 1, "observed_at": "2999-01-01T00:00Z"}]}},
        422,
        "invalid_data",
        "outcomes[0].observed_at",
        "2999-01-01T00:00:00+00:00",
    ),
    (
        "refit-since-a-number",
        "POST",
        "/risk-models/water-mains/refits",
        {"json": {"since": 1700000000}},
        422,
        "invalid_request",
        "since",
        1700000000,
    ),
    (
        "refit-until-year-1",
        "POST",
        "/risk-models/water-mains/refits",
        {"json": {"until": Y1}},
        422,
        "invalid_request",
        "until",
        Y1,
    ),
    (
        "calibration-since-unix-time",
        "GET",
        "/risk-models/water-mains/calibration",
        {"params": {"since": "1700000000"}},
        422,
        "invalid_request",
        "since",
        "1700000000",
    ),
    (
        "drift-until-year-9999",
        "GET",
        "/risk-models/water-mains/drift",
        {"params": {"until": Y9999}},
        422,
        "invalid_request",
        "until",
        Y9999,
    ),
    (
        "audit-since-year-1",
        "GET",
        "/audit-events",
        {"params": {"since": Y1}},
        422,
        "invalid_request",
        "since",
        Y1,
    ),
]
