"""File uploads read as the JSON columns are: number-like levels, limits on levels, empty cells.

Common practice: a CSV writer may print the integer level 2 as ``2.0``; both are one level.
"""

from __future__ import annotations

import io
import json
from typing import Any

import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq
import pytest

from service.app import create_app
from service.config import Settings
from tests.api._data import SPEC, fit_body, segments
from tests.api.conftest import ApiClient

SOIL_CODES = {"low": 1, "moderate": 2, "high": 3}
CODED_SPEC = {
    **SPEC,
    "features": [{**f, "reference": "1"} if f["name"] == "soil" else f for f in SPEC["features"]],
}


def _upload(
    api: ApiClient, model: str, content: bytes, fmt: str, spec: dict[str, Any] = SPEC
) -> Any:
    return api.post(
        f"/risk-models/{model}/versions",
        data={"spec": json.dumps(spec)},
        files={"data": (f"segments.{fmt}", content, "application/octet-stream")},
    )


def _csv(table: pa.Table) -> bytes:
    buf = io.BytesIO()
    pa_csv.write_csv(table, buf)
    return buf.getvalue()


def _parquet(table: pa.Table) -> bytes:
    buf = io.BytesIO()
    pq.write_table(table, buf, row_group_size=300)  # several row groups: several dictionaries
    return buf.getvalue()


def test_number_like_levels_in_files_equal_json_numbers(api: ApiClient) -> None:
    cols = segments(900, seed=21)
    cols["soil"] = [SOIL_CODES[s] for s in cols["soil"]]
    base = api.post("/risk-models/json/versions", json={**CODED_SPEC, "data": {"columns": cols}})
    assert base.status_code == 201, base.text
    # CSV: the soil codes written as 1.0 / 2.0 / 3.0 (floats) read as the levels "1", "2", "3"
    as_float = pa.table({**cols, "soil": [float(v) for v in cols["soil"]]})
    for model, content, fmt in (
        ("csv", _csv(as_float), "csv"),
        ("parquet-int", _parquet(pa.table(cols)), "parquet"),
    ):
        r = _upload(api, model, content, fmt, CODED_SPEC)
        assert r.status_code == 201, r.text
        assert r.json()["encoding"] == base.json()["encoding"]
        assert r.json()["term_table"] == base.json()["term_table"]
        assert r.json()["data_fingerprint"] == base.json()["data_fingerprint"]


def test_text_levels_spread_over_row_groups_and_csv_blocks(api: ApiClient) -> None:
    cols = segments(900, seed=22)
    # a level first seen in the last row group
    cols["material"] = cols["material"][:-200] + ["clay"] * 200
    base = api.post("/risk-models/json/versions", json=fit_body(cols)).json()
    assert any(t["name"] == "material=clay" for t in base["term_table"]["terms"])
    for fmt, content in (("parquet", _parquet(pa.table(cols))), ("csv", _csv(pa.table(cols)))):
        r = _upload(api, fmt, content, fmt)
        assert r.status_code == 201, r.text
        assert r.json()["term_table"] == base["term_table"]
        assert r.json()["data_fingerprint"] == base["data_fingerprint"]


@pytest.mark.parametrize("fmt", ["json", "csv", "parquet"])
def test_too_many_or_too_long_levels_are_refused(settings: Settings, fmt: str) -> None:
    api = ApiClient(create_app(settings.model_copy(update={"max_levels": 3})))
    try:
        cols = segments(600, seed=23)  # material has 4 levels
        if fmt == "json":
            r = api.post("/risk-models/m/versions", json=fit_body(cols))
        else:
            table = pa.table(cols)
            r = _upload(api, "m", _csv(table) if fmt == "csv" else _parquet(table), fmt)
        assert r.status_code == 422, r.text
        err = r.json()["error"]
        assert err["field"] == "data.columns.material" and err["value"] == 4, err
        assert api.get("/risk-models/m/versions").status_code == 404  # nothing stored
    finally:
        api.close()
    api = ApiClient(create_app(settings.model_copy(update={"max_string_length": 8})))
    try:
        # a file (a JSON body meets the body walk's string limit first)
        r = _upload(api, "m", _csv(pa.table(segments(600, seed=23))), "csv")
        assert r.status_code == 422, r.text
        assert r.json()["error"]["field"] == "data.columns.material"
        assert r.json()["error"]["value"] == len("asbestos cement")
    finally:
        api.close()


def test_an_empty_categorical_cell_in_parquet_is_named(api: ApiClient) -> None:
    cols = segments(600, seed=24)
    cols["soil"][17] = None
    r = _upload(api, "m", _parquet(pa.table(cols)), "parquet")
    assert r.status_code == 422, r.text
    assert r.json()["error"]["field"] == "data.columns.soil[17]"


def test_an_upload_spooled_to_disk_fits_as_one_kept_in_memory(
    api: ApiClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.api import uploads

    content = _csv(pa.table(segments(700, seed=25)))
    kept = _upload(api, "memory", content, "csv")
    monkeypatch.setattr(uploads._InMemoryParts, "spool_max_size", 1024)  # roll after 1 KiB
    spooled = _upload(api, "disk", content, "csv")
    assert kept.status_code == spooled.status_code == 201, spooled.text
    assert spooled.json()["term_table"] == kept.json()["term_table"]
    assert spooled.json()["data_fingerprint"] == kept.json()["data_fingerprint"]


# Unicode canonical equivalence (Unicode Standard Annex #15): "b\u00e9ton" (precomposed, NFC)
# and "be\u0301ton" (e + combining acute, NFD) are the same text, so the same level.
NFC_LEVEL = "b\u00e9ton"
NFD_LEVEL = "be\u0301ton"


def _mixed_spellings(n: int, seed: int) -> tuple[dict[str, list[Any]], dict[str, list[Any]]]:
    """Columns with 'ductile iron' renamed: once all NFC, once NFC and NFD alternating."""
    cols = segments(n, seed=seed)
    nfc = [NFC_LEVEL if m == "ductile iron" else m for m in cols["material"]]
    mixed = [
        (NFD_LEVEL if i % 2 else NFC_LEVEL) if m == "ductile iron" else m
        for i, m in enumerate(cols["material"])
    ]
    assert NFC_LEVEL in mixed and NFD_LEVEL in mixed and NFC_LEVEL != NFD_LEVEL
    return {**cols, "material": nfc}, {**cols, "material": mixed}


def test_nfc_and_nfd_spellings_of_a_level_are_one_level(api: ApiClient) -> None:
    nfc, mixed = _mixed_spellings(900, seed=23)
    base = api.post("/risk-models/nfc/versions", json={**SPEC, "data": {"columns": nfc}})
    assert base.status_code == 201, base.text
    material = next(f for f in base.json()["encoding"]["features"] if f["name"] == "material")
    assert NFC_LEVEL in material["levels"] and len(material["levels"]) == 4
    as_dict = pa.table({**mixed, "material": pa.array(mixed["material"]).dictionary_encode()})
    answers = {
        "columns": api.post(
            "/risk-models/cols/versions", json={**SPEC, "data": {"columns": mixed}}
        ),
        "rows": api.post(
            "/risk-models/rows/versions",
            json=fit_body()
            | {
                "data": {
                    "rows": [
                        dict(zip(mixed, vals, strict=True))
                        for vals in zip(*mixed.values(), strict=True)
                    ]
                }
            },
        ),
        "csv": _upload(api, "csv", _csv(pa.table(mixed)), "csv"),
        "parquet": _upload(api, "parquet", _parquet(pa.table(mixed)), "parquet"),
        "parquet-dictionary": _upload(api, "parquet-dict", _parquet(as_dict), "parquet"),
    }
    for how, r in answers.items():
        assert r.status_code == 201, (how, r.text)
        got = r.json()
        assert got["encoding"] == base.json()["encoding"], how  # one level, stored as NFC
        assert got["training_ranges"] == base.json()["training_ranges"], how
        assert got["data_fingerprint"] == base.json()["data_fingerprint"], how
        assert got["term_table"] == base.json()["term_table"], how


def test_a_reference_level_spelt_in_nfd_names_the_nfc_level(api: ApiClient) -> None:
    # Unicode Standard Annex #15: the spec's reference is text like the data's, matched in NFC.
    _, mixed = _mixed_spellings(900, seed=29)
    spec = {
        **SPEC,
        "features": [
            {**f, "reference": NFD_LEVEL} if f["name"] == "material" else f
            for f in SPEC["features"]
        ],
    }
    r = api.post("/risk-models/nfd-ref/versions", json={**spec, "data": {"columns": mixed}})
    assert r.status_code == 201, r.text
    material = next(f for f in r.json()["encoding"]["features"] if f["name"] == "material")
    assert material["reference"] == NFC_LEVEL
    assert all(NFD_LEVEL not in t["name"] for t in r.json()["term_table"]["terms"])


@pytest.mark.parametrize("name", ["key", "passthrough"])
def test_feature_names_a_score_record_uses_itself_are_refused(api: ApiClient, name: str) -> None:
    cols = segments(200, seed=31)
    spec = {**SPEC, "features": [*SPEC["features"], {"name": name, "kind": "numeric"}]}
    r = api.post(
        "/risk-models/reserved/versions",
        json={**spec, "data": {"columns": {**cols, name: cols["age_years"]}}},
    )
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] == f"features[{len(SPEC['features'])}].name"
    assert err["value"] == name and "rename" in err["remedy"]
