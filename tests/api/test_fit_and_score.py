"""Fit -> version stored -> score, checked against statsmodels and across upload formats."""

from __future__ import annotations

import io
import json
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import statsmodels.api as sm

from service.stats.design import Encoding
from tests.api._data import MATERIALS, NEW_RECORDS, SOILS, SPEC, fit_body, rows_of, segments
from tests.api.conftest import ApiClient, row_count

URL = "/risk-models/water-mains/versions"


def _independent_design(columns: dict[str, list[Any]], term_names: list[str]) -> np.ndarray:
    """Design matrix built with pandas, not with the engine: intercept, age, log(diameter),
    treatment dummies named ``feature=level`` (reference PVC / low), prior breaks."""
    df = pd.DataFrame(columns)
    X = pd.DataFrame({"intercept": 1.0, "age_years": df["age_years"].astype(float)})
    X["diameter_mm"] = np.log(df["diameter_mm"].astype(float))
    for feat, levels in (("material", MATERIALS), ("soil", SOILS)):
        for level in levels:
            X[f"{feat}={level}"] = (df[feat] == level).astype(float)
    X["prior_breaks_5y"] = df["prior_breaks_5y"].astype(float)
    return X[term_names].to_numpy()


def _statsmodels_fit(X: np.ndarray, y: np.ndarray) -> Any:
    # Reference solver: statsmodels GLM(Binomial) IRLS with a tight tolerance.
    return sm.GLM(y, X, family=sm.families.Binomial()).fit(tol=1e-13, maxiter=200)


def test_fit_then_score_matches_statsmodels(api: ApiClient) -> None:
    cols = segments()
    r = api.post(URL, json=fit_body(cols))
    assert r.status_code == 201, r.text
    v = r.json()
    assert v["number"] == 1 and v["is_champion"] is True
    names = [t["name"] for t in v["term_table"]["terms"]]
    assert names[0] == "intercept" and "material=cast iron" in names
    assert "material=PVC" not in names  # the reference level has no column
    X = _independent_design(cols, names)
    y = np.asarray(cols["outcome"], dtype=float)
    ref = _statsmodels_fit(X, y)
    est = np.array([t["estimate"] for t in v["term_table"]["terms"]])
    se = np.array([t["std_error"] for t in v["term_table"]["terms"]])
    np.testing.assert_allclose(est, ref.params, rtol=0, atol=1e-8)
    np.testing.assert_allclose(se, ref.bse, rtol=1e-7, atol=0)
    lo = np.array([t["ci_lower"] for t in v["term_table"]["terms"]])
    np.testing.assert_allclose(lo, ref.conf_int(alpha=0.05)[:, 0], rtol=0, atol=1e-7)
    stats = v["fit_statistics"]
    assert stats["n_obs"] == len(y) and stats["n_events"] == y.sum()
    np.testing.assert_allclose(stats["loglik"], ref.llf, rtol=1e-10)
    assert v["term_table"]["confidence_level"] == 0.95 and v["term_table"]["ci_method"] == "wald"

    r = api.post("/risk-models/water-mains/scores", json={"records": NEW_RECORDS})
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["version"] == 1 and out["confidence_level"] == 0.95
    assert out["ci_method"] == "wald-logit" and out["n_records"] == len(NEW_RECORDS)
    Xn = _independent_design({k: [rec[k] for rec in NEW_RECORDS] for k in NEW_RECORDS[0]}, names)
    # statsmodels GLMResults.get_prediction(...).conf_int(): interval on the logit scale,
    # mapped through the inverse link, as riskfit's ci_method "wald-logit" states.
    pr = ref.get_prediction(Xn)
    ci = pr.conf_int(alpha=0.05)
    got = out["scores"]
    np.testing.assert_allclose([s["probability"] for s in got], pr.predicted_mean, atol=1e-8)
    np.testing.assert_allclose([s["ci_lower"] for s in got], ci[:, 0], atol=1e-8)
    np.testing.assert_allclose([s["ci_upper"] for s in got], ci[:, 1], atol=1e-8)
    np.testing.assert_allclose([s["eta"] for s in got], Xn @ ref.params, atol=1e-8)
    np.testing.assert_allclose(
        [s["se_eta"] for s in got],
        np.sqrt(np.einsum("ij,jk,ik->i", Xn, ref.cov_params(), Xn)),
        rtol=1e-7,
    )
    assert row_count(api, "score") == len(NEW_RECORDS)


def test_confidence_level_and_explain(api: ApiClient) -> None:
    assert api.post(URL, json=fit_body()).status_code == 201
    body = {"records": NEW_RECORDS[:1], "confidence_level": 0.9, "explain": True}
    s90 = api.post("/risk-models/water-mains/scores", json=body).json()
    body["confidence_level"] = 0.99
    s99 = api.post("/risk-models/water-mains/scores", json=body).json()
    a, b = s90["scores"][0], s99["scores"][0]
    assert s90["confidence_level"] == 0.9
    assert b["ci_lower"] < a["ci_lower"] < a["probability"] < a["ci_upper"] < b["ci_upper"]
    # Contributions add up to the linear predictor (eta = sum_j x_j * coef_j, no offset).
    assert sum(a["contributions"].values()) == pytest.approx(a["eta"], abs=1e-12)


def test_extrapolation_warning(api: ApiClient) -> None:
    assert api.post(URL, json=fit_body()).status_code == 201
    rec = {**NEW_RECORDS[0], "age_years": 160}
    out = api.post("/risk-models/water-mains/scores", json={"records": [rec, NEW_RECORDS[1]]})
    assert out.status_code == 200
    w = [s["warnings"] for s in out.json()["scores"]]
    assert any("age_years" in m and "training range" in m for m in w[0]) and w[1] == []


def test_encoding_round_trips_through_the_store(api: ApiClient, settings: Any) -> None:
    v = api.post(URL, json=fit_body()).json()
    stored = api.get(f"{URL}/1").json()
    assert stored["encoding"] == v["encoding"]
    enc = Encoding.from_dict(stored["encoding"])
    assert enc.to_dict() == stored["encoding"]
    material = next(f for f in enc.features if f.name == "material")
    assert material.reference == "PVC" and set(material.levels) == {
        "PVC",
        "cast iron",
        "ductile iron",
        "asbestos cement",
    }
    first = api.post("/risk-models/water-mains/scores", json={"records": NEW_RECORDS}).json()
    # A fresh process (empty version cache) decodes the stored encoding the same way.
    from service.app import create_app

    other = ApiClient(create_app(settings))
    try:
        again = other.post("/risk-models/water-mains/scores", json={"records": NEW_RECORDS})
        assert [s["probability"] for s in again.json()["scores"]] == [
            s["probability"] for s in first["scores"]
        ]
    finally:
        other.close()


def _csv_bytes(cols: dict[str, list[Any]]) -> bytes:
    return pd.DataFrame(cols).to_csv(index=False).encode()


def _parquet_bytes(cols: dict[str, list[Any]]) -> bytes:
    buf = io.BytesIO()
    pq.write_table(pa.table(cols), buf)
    return buf.getvalue()


@pytest.mark.parametrize("fmt", ["csv", "parquet", "rows"])
def test_uploads_and_rows_equal_the_json_columns_fit(api: ApiClient, fmt: str) -> None:
    cols = segments(800, seed=11)
    base = api.post("/risk-models/a/versions", json=fit_body(cols)).json()
    if fmt == "rows":
        r = api.post("/risk-models/b/versions", json={**SPEC, "data": {"rows": rows_of(cols)}})
    else:
        import json

        content = _csv_bytes(cols) if fmt == "csv" else _parquet_bytes(cols)
        r = api.post(
            "/risk-models/b/versions",
            data={"spec": json.dumps(SPEC)},
            files={"data": (f"segments.{fmt}", content, "application/octet-stream")},
        )
    assert r.status_code == 201, r.text
    other = r.json()
    assert other["data_fingerprint"] == base["data_fingerprint"]
    assert other["term_table"] == base["term_table"]
    assert other["encoding"] == base["encoding"]


def test_a_boolean_feature_reads_true_and_false_when_fitted_and_when_scored(
    api: ApiClient,
) -> None:
    # JSON true/false in a categorical column: levels "true" / "false" in the fit (JSON
    # columns and Parquet alike) and the same levels when a record is scored with true.
    cols = segments(800, seed=21)
    cols["lined"] = [i % 3 == 0 for i in range(800)]
    spec = {**SPEC, "features": [*SPEC["features"], {"name": "lined", "kind": "categorical"}]}
    fit = api.post(URL, json={**spec, "data": {"columns": cols}})
    assert fit.status_code == 201, fit.text
    lined = next(f for f in fit.json()["encoding"]["features"] if f["name"] == "lined")
    assert sorted(lined["levels"]) == ["false", "true"]
    buf = io.BytesIO()
    pq.write_table(pa.table(cols), buf)
    up = api.post(
        "/risk-models/water-mains-file/versions",
        data={"spec": json.dumps(spec)},
        files={"data": ("d.parquet", buf.getvalue(), "application/octet-stream")},
    )
    assert up.status_code == 201, up.text
    assert up.json()["encoding"] == fit.json()["encoding"]
    scored = api.post(
        "/risk-models/water-mains/scores", json={"records": [{**NEW_RECORDS[0], "lined": True}]}
    )
    assert scored.status_code == 200, scored.text
