"""The catalogue of refused requests for tests/api/test_bad_input.py: each case is
(id, method, url, request kwargs, status, error code, field (substring), value)."""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

from tests.api._bad_input_dates import DATE_CASES
from tests.api._data import NEW_RECORDS, SPEC, fit_body, segments

FIT = "/risk-models/water-mains/versions"
SCORE = "/risk-models/water-mains/scores"


def _cols(**changes: Callable[[dict[str, list[Any]]], None]) -> dict[str, list[Any]]:
    cols = segments(600, seed=3)
    for change in changes.values():
        change(cols)
    return cols


def _set(name: str, i: int, value: Any) -> Callable[[dict[str, list[Any]]], None]:
    def change(cols: dict[str, list[Any]]) -> None:
        cols[name][i] = value

    return change


def _separated(cols: dict[str, list[Any]]) -> None:
    cols["outcome"] = [int(a > 60) for a in cols["age_years"]]


def _collinear(cols: dict[str, list[Any]]) -> None:
    cols["age_months"] = [a * 12 for a in cols["age_years"]]


def _rec(**changes: Any) -> dict[str, Any]:
    rec = {**NEW_RECORDS[0], **changes}
    return {k: v for k, v in rec.items() if v != "<drop>"}


COLLINEAR_SPEC = {
    **SPEC,
    "features": [*SPEC["features"], {"name": "age_months", "kind": "numeric"}],
}

# (id, method, url, request kwargs, status, error code, field (substring), value)
CASES: list[tuple[str, str, str, Any, int, str, str | None, Any]] = [
    (
        "fit-empty",
        "POST",
        FIT,
        {"json": fit_body({k: [] for k in segments(5)})},
        422,
        "invalid_data",
        "data",
        0,
    ),
    (
        "fit-one-class",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=lambda c: c.update(outcome=[0] * len(c["outcome"]))))},
        422,
        "single_class",
        None,
        None,
    ),
    (
        "fit-separated",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=_separated))},
        422,
        "separation",
        None,
        None,
    ),
    (
        "fit-collinear",
        "POST",
        FIT,
        {"json": {**COLLINEAR_SPEC, "data": {"columns": _cols(a=_collinear)}}},
        422,
        "rank_deficient",
        None,
        None,
    ),
    (
        "fit-nan",
        "POST",
        FIT,
        {
            "content": json.dumps(fit_body(_cols(a=_set("age_years", 5, float("nan"))))),
            "headers": {"content-type": "application/json"},
        },
        422,
        "invalid_data",
        "data.columns.age_years[5]",
        "NaN",
    ),
    (
        "fit-text-in-numeric",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=_set("age_years", 9, "old")))},
        422,
        "invalid_data",
        "data.columns.age_years[9]",
        "old",
    ),
    (
        # JSON true among numbers: numpy would cast [true, 12, ...] to integers; refused.
        "fit-bool-in-numeric",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=_set("prior_breaks_5y", 4, True)))},
        422,
        "invalid_data",
        "data.columns.prior_breaks_5y[4]",
        True,
    ),
    (
        "fit-null-category",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=_set("soil", 2, None)))},
        422,
        "invalid_data",
        "data.columns.soil[2]",
        "null",
    ),
    (
        "fit-outcome-2",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=_set("outcome", 4, 2)))},
        422,
        "invalid_data",
        "data.columns.outcome[4]",
        2.0,
    ),
    (
        "fit-missing-feature",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=lambda c: c.pop("soil")))},
        422,
        "missing_feature",
        "soil",
        "soil",
    ),
    (
        "fit-log-of-zero",
        "POST",
        FIT,
        {"json": fit_body(_cols(a=_set("diameter_mm", 0, 0)))},
        422,
        "invalid_data",
        "diameter_mm",
        None,
    ),
    (
        "fit-unknown-kind",
        "POST",
        FIT,
        {"json": {**fit_body(), "features": [{"name": "age_years", "kind": "ordinal"}]}},
        422,
        "invalid_request",
        "features[0].kind",
        "ordinal",
    ),
    (
        "fit-extra-field",
        "POST",
        FIT,
        {"json": {**fit_body(), "colour": "red"}},
        422,
        "invalid_request",
        "colour",
        "red",
    ),
    (
        "fit-bad-json",
        "POST",
        FIT,
        {"content": b"{not json", "headers": {"content-type": "application/json"}},
        422,
        "invalid_request",
        None,
        None,
    ),
    (
        "fit-malformed-csv",
        "POST",
        FIT,
        {
            "data": {"spec": json.dumps(SPEC)},
            "files": {"data": ("x.csv", b"age_years,soil\n1,2,3,4\n\x00\x01", "text/csv")},
        },
        422,
        "invalid_data",
        "data",
        "x.csv",
    ),
    (
        "fit-empty-file",
        "POST",
        FIT,
        {"data": {"spec": json.dumps(SPEC)}, "files": {"data": ("x.csv", b"", "text/csv")}},
        422,
        "invalid_data",
        "data",
        "x.csv",
    ),
    (
        "fit-bad-model-name",
        "POST",
        "/risk-models/bad%20name!/versions",
        {"json": fit_body()},
        422,
        "invalid_request",
        "model",
        "bad name!",
    ),
    (
        "score-bad-model-name",
        "POST",
        "/risk-models/bad%20name!/scores",
        {"json": {"records": [_rec()]}},
        422,
        "invalid_request",
        "model",
        "bad name!",
    ),
    (
        "score-model-name-too-long",
        "POST",
        "/risk-models/" + "m" * 101 + "/scores",
        {"json": {"records": [_rec()]}},
        422,
        "invalid_request",
        "model",
        "m" * 101,
    ),
    (
        "score-unseen-level",
        "POST",
        SCORE,
        {"json": {"records": [_rec(material="copper")]}},
        422,
        "unseen_level",
        "material",
        "copper",
    ),
    (
        "score-missing-feature",
        "POST",
        SCORE,
        {"json": {"records": [_rec(soil="<drop>")]}},
        422,
        "missing_feature",
        "records[0].soil",
        None,
    ),
    (
        "score-nan",
        "POST",
        SCORE,
        {
            "content": json.dumps({"records": [NEW_RECORDS[1], _rec(age_years=float("nan"))]}),
            "headers": {"content-type": "application/json"},
        },
        422,
        "invalid_data",
        "records[1].age_years",
        "NaN",
    ),
    (
        "score-text-in-numeric",
        "POST",
        SCORE,
        {"json": {"records": [_rec(prior_breaks_5y="two")]}},
        422,
        "invalid_data",
        "records[0].prior_breaks_5y",
        "two",
    ),
    (
        "score-bool-among-numbers",
        "POST",
        SCORE,
        {"json": {"records": [_rec(), _rec(prior_breaks_5y=False)]}},
        422,
        "invalid_data",
        "records[1].prior_breaks_5y",
        False,
    ),
    (
        "score-nested-value",
        "POST",
        SCORE,
        {"json": {"records": [_rec(age_years=[1, 2])]}},
        422,
        "invalid_request",
        "records[0].age_years",
        None,
    ),
    (
        "score-empty",
        "POST",
        SCORE,
        {"json": {"records": []}},
        422,
        "invalid_request",
        "records",
        None,
    ),
    (
        "score-unknown-model",
        "POST",
        "/risk-models/nope/scores",
        {"json": {"records": NEW_RECORDS}},
        404,
        "model_not_found",
        "model",
        "nope",
    ),
    (
        "score-unknown-version",
        "POST",
        SCORE,
        {"json": {"records": NEW_RECORDS, "version": 7}},
        404,
        "version_not_found",
        "version",
        7,
    ),
    (
        "score-negative-version",
        "POST",
        SCORE,
        {"json": {"records": NEW_RECORDS, "version": -1}},
        422,
        "invalid_request",
        "version",
        -1,
    ),
    (
        "score-level-out-of-range",
        "POST",
        SCORE,
        {"json": {"records": NEW_RECORDS, "confidence_level": 1.5}},
        422,
        "invalid_request",
        "confidence_level",
        1.5,
    ),
    ("get-unknown-version", "GET", f"{FIT}/9", {}, 404, "version_not_found", "version", 9),
    ("get-unknown-model", "GET", "/risk-models/nope", {}, 404, "model_not_found", "model", "nope"),
    (
        "champion-unknown-version",
        "PUT",
        "/risk-models/water-mains/champion",
        {"json": {"version": 5, "reason": "try"}},
        404,
        "version_not_found",
        "version",
        5,
    ),
    (
        "champion-empty-reason",
        "PUT",
        "/risk-models/water-mains/champion",
        {"json": {"version": 1, "reason": ""}},
        422,
        "invalid_request",
        "reason",
        "",
    ),
    *DATE_CASES,  # tests/api/_bad_input_dates.py
]
