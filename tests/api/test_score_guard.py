"""The extrapolation guard and the finite answer (issue 15.6; service/score_guard.py).

* A value more than ``RISKFIT_EXTRAPOLATION_LIMIT`` (default 10) training ranges outside its
  feature's training range is refused with 422 naming the record, the field, the value, the
  training range and the remedy, in the rows layout, the columns layout and the one-record
  path; nothing is logged.
* Records near the guard (inside it) are scored like statsmodels
  ``GLMResults.get_prediction(...).summary_frame()`` on an independently built design.
* With the guard off, an absurd value still gets finite numbers (never null): ``se_eta``
  equals the quadratic form computed in exact rational arithmetic; a record whose design row
  overflows is refused naming its field.
"""

from __future__ import annotations

from fractions import Fraction
from math import isqrt
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from models_store.models import require_model
from models_store.versions import require_version
from service.app import create_app
from service.config import Settings
from service.errors import DataError
from service.score_input import records_input
from service.scoring import score_prepared
from service.stats.design import learn_encoding
from service.version_cache import LoadedVersion
from tests.api._data import NEW_RECORDS, fit_body, segments
from tests.api.conftest import ApiClient, row_count, store_dump
from tests.api.test_fit_and_score import _independent_design, _statsmodels_fit

URL = "/risk-models/water-mains/versions"
SCORE = "/risk-models/water-mains/scores"


def _fit(api: ApiClient) -> dict[str, Any]:
    r = api.post(URL, json=fit_body())
    assert r.status_code == 201, r.text
    return {f["name"]: f for f in r.json()["encoding"]["features"]}


def _guard_bounds(feature: dict[str, Any], k: float = 10.0) -> tuple[float, float]:
    lo, hi = feature["minimum"], feature["maximum"]
    return lo - k * (hi - lo), hi + k * (hi - lo)


def _assert_guard_error(r: Any, field: str, value: float, lo: float, hi: float) -> None:
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] == field
    assert err["value"] == value
    assert f"[{lo:g}, {hi:g}]" in err["message"]  # the training range
    assert "RISKFIT_EXTRAPOLATION_LIMIT" in err["remedy"] and "check the value" in err["remedy"]
    assert err["details"]["training_range"] == [lo, hi]


def test_absurd_value_is_refused_in_rows_columns_and_one_record(api: ApiClient) -> None:
    features = _fit(api)
    age = features["age_years"]
    before = store_dump(api)
    records = [dict(r) for r in NEW_RECORDS[:4]]
    records[2]["age_years"] = 1e308  # the example: scored p = 1, [0, 1], se null
    r = api.post(SCORE, json={"records": records})
    _assert_guard_error(r, "records[2].age_years", 1e308, age["minimum"], age["maximum"])
    assert "records[2]" in r.text or "record 2" in r.json()["error"]["message"]
    cols = {k: [rec[k] for rec in records] for k in records[0]}
    r = api.post(SCORE, json={"columns": cols})
    _assert_guard_error(r, "columns.age_years[2]", 1e308, age["minimum"], age["maximum"])
    r = api.post(SCORE, json={"records": [records[2]]})  # the compiled one-record path
    _assert_guard_error(r, "records[0].age_years", 1e308, age["minimum"], age["maximum"])
    assert store_dump(api) == before  # nothing logged


def test_guard_bounds_are_k_training_ranges(api: ApiClient) -> None:
    features = _fit(api)
    lo, hi = _guard_bounds(features["age_years"])
    width = features["age_years"]["maximum"] - features["age_years"]["minimum"]
    for value in (hi + 0.001 * width, lo - 0.001 * width):
        r = api.post(SCORE, json={"records": [{**NEW_RECORDS[0], "age_years": value}]})
        assert r.status_code == 422, r.text
        assert r.json()["error"]["details"]["allowed_range"] == pytest.approx([lo, hi])
    for value in (hi - 0.001 * width, lo + 0.001 * width):  # inside: scored, with a warning
        r = api.post(SCORE, json={"records": [{**NEW_RECORDS[0], "age_years": value}]})
        assert r.status_code == 200, r.text
        assert r.json()["scores"][0]["warnings"][0].startswith("extrapolation: age_years=")
    # a log feature is guarded on its raw scale: diameter_mm fitted on [100, 450]
    _, dhi = _guard_bounds(features["diameter_mm"])
    r = api.post(SCORE, json={"records": [{**NEW_RECORDS[0], "diameter_mm": dhi * 1.01}]})
    assert r.status_code == 422 and r.json()["error"]["field"] == "records[0].diameter_mm"


def test_near_the_guard_matches_statsmodels(api: ApiClient) -> None:
    cols = segments()
    features = _fit(api)
    names = [t["name"] for t in api.get(f"{URL}/1").json()["term_table"]["terms"]]
    ref = _statsmodels_fit(_independent_design(cols, names), np.asarray(cols["outcome"], float))
    rng = np.random.default_rng(15)
    records = []
    for i in range(12):
        rec = dict(NEW_RECORDS[i % len(NEW_RECORDS)])
        for name in ("age_years", "diameter_mm", "prior_breaks_5y"):
            lo, hi = _guard_bounds(features[name])
            if name == "diameter_mm":
                lo = features[name]["minimum"] / 2  # > 0 for the log
            side = rng.integers(0, 2)
            rec[name] = float(hi - rng.uniform(0, 0.05) * (hi - lo)) if side else float(lo)
        records.append(rec)
    r = api.post(SCORE, json={"records": records})
    assert r.status_code == 200, r.text
    got = r.json()["scores"]
    Xn = _independent_design({k: [rec[k] for rec in records] for k in records[0]}, names)
    # Reference: statsmodels GLM(Binomial) get_prediction(...).summary_frame(alpha=0.05): mean
    # and its interval mapped from the logit scale (riskfit's ci_method "wald-logit").
    frame = ref.get_prediction(Xn).summary_frame(alpha=0.05)
    lin = ref.get_prediction(Xn, which="linear")
    eta = np.array([s["eta"] for s in got])
    np.testing.assert_allclose(eta, lin.predicted, rtol=1e-7, atol=1e-7)
    np.testing.assert_allclose([s["se_eta"] for s in got], lin.se, rtol=1e-6)
    # far from 1/2 the probabilities are tiny or near 1: compare p and 1 - p relatively
    for col, key in (("mean", "probability"), ("mean_ci_lower", "ci_lower")):
        mine = np.array([s[key] for s in got])
        theirs = frame[col].to_numpy()
        np.testing.assert_allclose(mine, theirs, rtol=1e-6, atol=1e-300)
        np.testing.assert_allclose(1 - mine, 1 - theirs, rtol=1e-6, atol=1e-15)
    np.testing.assert_allclose(
        [s["ci_upper"] for s in got], frame["mean_ci_upper"], rtol=1e-6, atol=1e-300
    )
    assert all(s["warnings"] for s in got)  # every record extrapolates


def _api(tmp_path: Path, **settings: Any) -> ApiClient:
    url = f"sqlite:///{tmp_path / 'guard.db'}"
    return ApiClient(create_app(Settings(database_url=url, auth_required=False, **settings)))


def test_guard_off_still_answers_finite_numbers(tmp_path: Path) -> None:
    api = _api(tmp_path, extrapolation_limit=0)
    try:
        assert api.post(URL, json=fit_body()).status_code == 201
        version = api.get(f"{URL}/1").json()
        rec = {**NEW_RECORDS[0], "age_years": 1e300}
        for body in ({"records": [rec]}, {"records": [rec, NEW_RECORDS[1]]}):
            r = api.post(SCORE, json=body)
            assert r.status_code == 200, r.text
            s = r.json()["scores"][0]
            for key in ("probability", "ci_lower", "ci_upper", "eta", "se_eta"):
                assert isinstance(s[key], float), (key, s[key])  # never null
            assert s["warnings"] and 0.0 <= s["ci_lower"] <= s["probability"] <= s["ci_upper"]
            # se_eta = sqrt(x' V x) in exact rational arithmetic (Fraction), then rounded
            names = [t["name"] for t in version["term_table"]["terms"]]
            x = _independent_design({k: [rec[k]] for k in rec}, names)[0]
            V = np.asarray(_cov(api))
            q = sum(
                Fraction(float(x[a])) * Fraction(float(V[a, b])) * Fraction(float(x[b]))
                for a in range(len(x))
                for b in range(len(x))
            )
            assert s["se_eta"] == pytest.approx(_sqrt_fraction(q), rel=1e-9)
        assert row_count(api, "score") == 3
    finally:
        api.close()


def _cov(api: ApiClient) -> list[list[float]]:
    with api.app.state.session_factory() as s:
        model = require_model(session=s, name="water-mains")
        return list(require_version(session=s, model=model, number=1).cov)


def _sqrt_fraction(q: Fraction) -> float:
    """sqrt of a positive rational to double precision (integer square roots, exact)."""
    scale = 4**200
    root = isqrt(q.numerator * scale // q.denominator)
    return float(Fraction(root, 2**200))


def _overflowing_version() -> LoadedVersion:
    """age_years as a spline: its cubic basis overflows for age 1e200 (guard off)."""
    cols = segments(400, seed=3)
    spec = [{"name": "age_years", "kind": "spline", "knots": 4}]
    enc = learn_encoding(spec, cols)
    p = len(enc.term_names)
    ranges = {"age_years": {"min": enc.features[0].minimum, "max": enc.features[0].maximum}}
    return LoadedVersion(
        1, enc, {"age_years": "spline"}, None, enc.term_names, np.ones(p), np.eye(p) * 0.01, ranges
    )


def test_overflow_is_refused_naming_the_field_not_x() -> None:
    v = _overflowing_version()
    batch = records_input([{"age_years": 50.0}, {"age_years": 1e200}], v.inputs)
    with pytest.raises(DataError) as caught:
        score_prepared(
            model=None,  # type: ignore[arg-type]  # not reached: refused before the log rows
            v=v,
            batch=batch,
            confidence_level=0.95,
            explain=False,
            extrapolation_limit=0.0,
        )
    err = caught.value
    assert err.field == "records[1].age_years" and err.value == 1e200
    assert "RISKFIT_EXTRAPOLATION_LIMIT" in (err.remedy or "")


def test_the_setting_refuses_a_negative_limit() -> None:
    with pytest.raises(ValueError, match="extrapolation_limit"):
        Settings(extrapolation_limit=-1)
