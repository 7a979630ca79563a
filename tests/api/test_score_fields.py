"""What a scoring record may hold (issues 16.11 and 16.12; service/score_input.py).

* Unknown fields are refused (422 naming the record, the unknown field, the known ones and
  the remedy) in the rows layout, the columns layout and the one-record path; nothing is
  logged. The caller's own data go in ``passthrough``, echoed with the score (every answer
  form: rows, columns, one record, ``explain``), not used for scoring, not logged.
* Text is compared in Unicode NFC: a level fitted as "é" (NFC, U+00E9) scores the same when
  sent as NFD ("e" + U+0301), in every layout, and the score log holds the NFC spelling.
  Normal forms as defined by Unicode Standard Annex #15, computed here with Python's
  ``unicodedata`` (an independent implementation of the annex).
"""

from __future__ import annotations

import unicodedata
from typing import Any

import numpy as np
import orjson
import pytest
from sqlalchemy import select

from models_store.orm import Score
from tests.api._data import NEW_RECORDS, fit_body, segments
from tests.api.conftest import ApiClient, row_count, store_dump

URL = "/risk-models/water-mains/versions"
SCORE = "/risk-models/water-mains/scores"
NFC_E = "\u00e9"  # é precomposed
NFD_E = "e\u0301"  # e + combining acute accent


def _fit(api: ApiClient, columns: dict[str, list[Any]] | None = None) -> None:
    r = api.post(URL, json=fit_body(columns))
    assert r.status_code == 201, r.text


def _json(value: Any) -> Any:
    return orjson.loads(value) if isinstance(value, str | bytes) else value


def _columns(records: list[dict[str, Any]]) -> dict[str, list[Any]]:
    return {k: [r.get(k) for r in records] for k in records[0]}


# --- unknown fields ---------------------------------------------------------------------------


def test_a_misspelt_field_is_refused_in_every_layout(api: ApiClient) -> None:
    _fit(api)
    before = store_dump(api)
    records = [dict(r) for r in NEW_RECORDS[:3]]
    records[1]["agee"] = 40  # a stray field beside age_years
    r = api.post(SCORE, json={"records": records})
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] == "records[1].agee" and err["value"] == 40
    assert "records[1]" in err["message"] and "'agee'" in err["message"]
    assert (
        "'age_years'" in err["message"] and "did you mean 'age_years' for 'agee'?" in err["message"]
    )
    assert "passthrough" in err["remedy"]
    assert err["details"]["unknown"] == ["agee"]
    assert err["details"]["known"][:5] == [
        "age_years",
        "diameter_mm",
        "material",
        "soil",
        "prior_breaks_5y",
    ]
    one = api.post(SCORE, json={"records": [records[1]]})  # the compiled one-record path
    assert one.status_code == 422 and one.json()["error"]["field"] == "records[0].agee"
    cols = {**_columns(NEW_RECORDS[:3]), "agee": [1, 2, 3]}
    c = api.post(SCORE, json={"columns": cols})
    assert c.status_code == 422, c.text
    assert c.json()["error"]["field"] == "columns.agee"
    assert "passthrough" in c.json()["error"]["remedy"]
    assert store_dump(api) == before


def test_an_outcome_or_id_column_is_refused_not_dropped(api: ApiClient) -> None:
    _fit(api)
    rec = {**NEW_RECORDS[0], "segment_id": "S-1", "key": "k1"}
    r = api.post(SCORE, json={"records": [rec, {**NEW_RECORDS[1], "key": "k2"}]})
    assert r.status_code == 422
    assert r.json()["error"]["field"] == "records[0].segment_id"
    assert row_count(api, "score") == 0


# --- passthrough ------------------------------------------------------------------------------


def test_passthrough_is_echoed_not_scored_not_logged(api: ApiClient) -> None:
    _fit(api)
    plain = api.post(SCORE, json={"records": NEW_RECORDS[:3]}).json()["scores"]
    assert all("passthrough" not in s for s in plain)  # no passthrough sent: no such field
    extra = [{"segment_id": "S-1", "n": 3, "ok": True}, None, {"note": "Caf" + NFD_E}]
    records = [
        {**r, "passthrough": p} if p is not None else dict(r)
        for r, p in zip(NEW_RECORDS[:3], extra, strict=True)
    ]
    expected = [extra[0], None, {"note": "Caf" + NFC_E}]  # text echoed in NFC
    for body in (
        {"records": records},
        {"columns": {**_columns(NEW_RECORDS[:3]), "passthrough": extra}},
        {"records": records, "explain": True},
    ):
        r = api.post(SCORE, json=body)
        assert r.status_code == 200, r.text
        got = r.json()["scores"]
        assert [s["passthrough"] for s in got] == expected
        assert [s["probability"] for s in got] == [s["probability"] for s in plain]
    one = api.post(SCORE, json={"records": records[:1]}).json()["scores"][0]
    assert one["passthrough"] == extra[0] and one["probability"] == plain[0]["probability"]
    with api.app.state.session_factory() as s:
        logged = [_json(i) for i in s.scalars(select(Score.inputs)).all()]
    assert logged and all(set(i) == set(NEW_RECORDS[0]) for i in logged)


@pytest.mark.parametrize(
    ("passthrough", "field"),
    [
        ({"tags": ["a", "b"]}, "records[0].passthrough.tags"),
        ({"inner": {"a": 1}}, "records[0].passthrough.inner"),
        ("S-1", "records[0].passthrough"),
    ],
)
def test_a_malformed_passthrough_is_refused(api: ApiClient, passthrough: Any, field: str) -> None:
    _fit(api)
    for records in (
        [{**NEW_RECORDS[0], "passthrough": passthrough}],
        [{**NEW_RECORDS[0], "passthrough": passthrough}, NEW_RECORDS[1]],
    ):
        r = api.post(SCORE, json={"records": records})
        assert r.status_code == 422, r.text
        assert r.json()["error"]["field"] == field
        assert r.json()["error"]["remedy"]
    assert row_count(api, "score") == 0


# --- Unicode normal forms ---------------------------------------------------------------------


def _accented_columns() -> dict[str, list[Any]]:
    cols = segments(1500, seed=11)
    cols["material"] = [
        "fonte ductile " + NFC_E if m == "ductile iron" else m for m in cols["material"]
    ]
    return cols


def test_nfd_text_scores_as_the_nfc_level(api: ApiClient) -> None:
    level = "fonte ductile " + NFC_E
    assert unicodedata.normalize("NFD", level) != level  # the two spellings differ as text
    _fit(api, _accented_columns())
    levels = api.get(f"{URL}/1").json()["encoding"]["features"][2]["levels"]
    assert level in levels
    nfc = {**NEW_RECORDS[0], "material": level}
    nfd = {**NEW_RECORDS[0], "material": unicodedata.normalize("NFD", level)}
    want = api.post(SCORE, json={"records": [nfc]}).json()["scores"][0]
    for body in (
        {"records": [nfd]},  # one-record path
        {"records": [nfd, nfc]},  # rows
        {"columns": _columns([nfd, nfc])},  # columns
    ):
        r = api.post(SCORE, json=body)
        assert r.status_code == 200, r.text
        for s in r.json()["scores"]:
            # the same design row; batch and one-record BLAS calls may differ in the last bit
            assert s["probability"] == pytest.approx(want["probability"], rel=1e-13)
            assert s["eta"] == pytest.approx(want["eta"], rel=1e-13)
    with api.app.state.session_factory() as s:
        logged = [_json(i)["material"] for i in s.scalars(select(Score.inputs)).all()]
    assert logged == [level] * len(logged) and len(logged) == 6


def test_a_version_stored_with_nfd_levels_still_scores_both_spellings() -> None:
    from service.score_input import level_spelling, spelled  # new in this change

    stored = ["PVC", "fonte ductile " + NFD_E]  # a version fitted before fit data were NFC
    spelling = level_spelling(stored)
    sent = np.array(["PVC", "fonte ductile " + NFC_E, "fonte ductile " + NFD_E], dtype=object)
    assert spelled(sent, spelling).tolist() == ["PVC", stored[1], stored[1]]
    ascii_only = np.array(["PVC", "PVC"], dtype=object)
    assert spelled(ascii_only, level_spelling(["PVC", "cast iron"])) is ascii_only


def test_a_misspelt_feature_is_named_with_its_likely_meaning(api: ApiClient) -> None:
    _fit(api)
    rec = {k: v for k, v in NEW_RECORDS[0].items() if k != "age_years"}
    rec["age_yaers"] = 85  # misspelt instead of missing
    for body in ({"records": [rec]}, {"records": [NEW_RECORDS[1], rec]}):
        r = api.post(SCORE, json=body)
        assert r.status_code == 422, r.text
        err = r.json()["error"]
        assert err["field"].endswith("].age_yaers") and err["value"] == 85
        assert "did you mean 'age_years' for 'age_yaers'?" in err["message"]
