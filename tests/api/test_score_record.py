"""The compiled one-record path (service.score_record) against the general path and statsmodels.

* Bit for bit: for seeded records of a model with every kind of term (numeric, log, spline,
  categorical, an interaction and an offset) the plan's design row, the predictions, the log
  rows and the answer equal those of the general path (design_matrix on columns of length 1).
* Over HTTP: one-record requests of the test model agree with statsmodels
  ``GLM(Binomial).get_prediction`` on an independently built design (pandas), are logged, and
  a record the plan leaves to the general path gets exactly the general path's error.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import orjson
import pytest
from sqlalchemy import select

from models_store.orm import RiskModel, Score
from service.score_input import records_input
from service.scoring import score_prepared, score_record
from service.stats.design import design_matrix, learn_encoding
from service.version_cache import LoadedVersion
from tests.api._data import NEW_RECORDS, fit_body, segments
from tests.api.conftest import ApiClient
from tests.api.test_fit_and_score import _independent_design, _statsmodels_fit

SCORE = "/risk-models/water-mains/scores"
RICH_SPEC: list[dict[str, Any]] = [
    {"name": "age_years", "kind": "spline", "knots": 4},
    {"name": "diameter_mm", "kind": "numeric", "transform": "log"},
    {"name": "material", "kind": "categorical", "reference": "PVC"},
    {"name": "soil", "kind": "categorical"},
    {"name": "prior_breaks_5y", "kind": "spline", "transform": "log", "knots": 3},
]


def _rich_version() -> LoadedVersion:
    """A version with splines, logs, dummies, two interactions and an offset (coefficients and
    covariance drawn at random: only the arithmetic is compared, not a fit)."""
    cols = segments(800, seed=21)
    cols["prior_breaks_5y"] = [v + 1 for v in cols["prior_breaks_5y"]]  # > 0 for the log
    enc = learn_encoding(
        RICH_SPEC, cols, interactions=[("material", "age_years"), ("soil", "diameter_mm")]
    )
    rng = np.random.default_rng(5)
    p = len(enc.term_names)
    a = rng.standard_normal((p, p)) * 0.1
    kinds = {f["name"]: f["kind"] for f in RICH_SPEC}
    ranges = {f.name: {"min": f.minimum, "max": f.maximum} for f in enc.features}
    return LoadedVersion(
        1, enc, kinds, "exposure", enc.term_names, rng.standard_normal(p), a @ a.T, ranges
    )


def _records(n: int, seed: int) -> list[dict[str, Any]]:
    rng = np.random.default_rng(seed)
    cols = segments(n, seed=seed)
    out = []
    for i in range(n):
        rec = {k: cols[k][i] for k in ("age_years", "diameter_mm", "material", "soil")}
        rec["prior_breaks_5y"] = cols["prior_breaks_5y"][i] + 1
        rec["exposure"] = float(rng.normal(0, 0.5)) if i % 2 else int(rng.integers(-2, 3))
        if i % 5 == 0:
            rec["age_years"] = float(rng.uniform(150, 200))  # outside the training range
        if i % 3 == 0:
            rec["key"] = f"k-{i}" if i % 2 else i  # a number key is written as text
        out.append(rec)
    return out


def test_plan_rows_equal_design_matrix_bit_for_bit() -> None:
    v = _rich_version()
    for rec in _records(60, seed=3):
        d = v.record_plan.design(rec)
        assert d is not None
        cols = {k: [rec[k]] for k in v.kinds}
        ref = design_matrix(v.encoding, cols)
        assert d.X.tobytes() == ref.X.tobytes()
        flagged = [k for k, mask in ref.extrapolated.items() if mask[0]]
        assert d.outside == [(k, float(rec[k])) for k in flagged]
    assert any(v.record_plan.design(rec).outside for rec in _records(60, seed=3))  # type: ignore[union-attr]


def test_scored_record_equals_the_general_path() -> None:
    v = _rich_version()
    model = RiskModel(id=1, name="m", description=None)
    for explain in (False, True):
        for rec in _records(40, seed=8):
            fast = score_record(model=model, v=v, record=rec, confidence_level=0.9, explain=explain)
            assert fast is not None
            general = score_prepared(
                model=model,
                v=v,
                batch=records_input([rec], v.inputs),
                confidence_level=0.9,
                explain=explain,
            )
            for field in ("keys", "inputs_json", "eta", "se_eta", "probability"):
                assert getattr(fast.rows, field) == getattr(general.rows, field), field
            a, b = fast.answer(), general.answer()
            for ans in (a, b):  # fresh per request: the score id and the time
                ans.pop("created_at")
                ans["scores"][0].pop("score_id")
            assert a == b
            if not explain:
                x, y = orjson.loads(fast.answer_json()), orjson.loads(general.answer_json())
                assert x["scores"][0]["warnings"] == y["scores"][0]["warnings"]
                assert orjson.dumps(x["scores"][0]["probability"]) == orjson.dumps(
                    y["scores"][0]["probability"]
                )


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("age_years", True),  # a bool is not a number
        ("age_years", "85"),
        ("age_years", None),
        ("age_years", float("nan")),
        ("age_years", 2**70),  # beyond float64's exact integers
        ("diameter_mm", 0),  # log of a non-positive value
        ("material", "copper"),  # unseen level
        ("material", 3),  # a number where a level is expected
        ("soil", None),
        ("exposure", "x"),  # the offset
        ("prior_breaks_5y", -1),
    ],
)
def test_plan_leaves_unusual_values_to_the_general_path(field: str, value: Any) -> None:
    v = _rich_version()
    rec = {**_records(1, seed=4)[0], field: value}
    assert v.record_plan.design(rec) is None
    missing = {k: x for k, x in rec.items() if k != field}
    assert v.record_plan.design(missing) is None


def test_one_record_requests_match_statsmodels(api: ApiClient) -> None:
    cols = segments()
    r = api.post("/risk-models/water-mains/versions", json=fit_body(cols))
    assert r.status_code == 201, r.text
    names = [t["name"] for t in r.json()["term_table"]["terms"]]
    ref = _statsmodels_fit(_independent_design(cols, names), np.asarray(cols["outcome"], float))
    got = []
    for rec in NEW_RECORDS:
        out = api.post(SCORE, json={"records": [rec]})
        assert out.status_code == 200, out.text
        got.append(out.json()["scores"][0])
    Xn = _independent_design({k: [rec[k] for rec in NEW_RECORDS] for k in NEW_RECORDS[0]}, names)
    # statsmodels GLMResults.get_prediction(...).conf_int(): interval on the logit scale,
    # mapped through the inverse link ("wald-logit").
    pr = ref.get_prediction(Xn)
    ci = pr.conf_int(alpha=0.05)
    np.testing.assert_allclose([s["probability"] for s in got], pr.predicted_mean, atol=1e-8)
    np.testing.assert_allclose([s["ci_lower"] for s in got], ci[:, 0], atol=1e-8)
    np.testing.assert_allclose([s["ci_upper"] for s in got], ci[:, 1], atol=1e-8)
    np.testing.assert_allclose([s["eta"] for s in got], Xn @ ref.params, atol=1e-8)
    with api.app.state.session_factory() as s:
        stored = {row.id: row for row in s.scalars(select(Score))}
    for rec, item in zip(NEW_RECORDS, got, strict=True):
        row = stored[item["score_id"]]
        assert row.inputs == rec and row.probability == item["probability"]


@pytest.mark.parametrize(
    "bad",
    [
        {"age_years": "old"},
        {"age_years": True},
        {"diameter_mm": -5},
        {"material": "copper"},
        {"soil": None},
        {"key": ""},
        {"key": ["x"]},
    ],
)
def test_a_refused_record_gets_the_general_paths_error(api: ApiClient, bad: dict[str, Any]) -> None:
    assert api.post("/risk-models/water-mains/versions", json=fit_body()).status_code == 201
    rec = {**NEW_RECORDS[0], **bad}
    one = api.post(SCORE, json={"records": [rec]})
    two = api.post(SCORE, json={"records": [rec, NEW_RECORDS[1]]})  # always the general path
    assert 400 <= one.status_code < 500
    assert (one.status_code, one.json()) == (two.status_code, two.json())
    missing = {k: x for k, x in NEW_RECORDS[0].items() if k != "soil"}
    one = api.post(SCORE, json={"records": [missing]})
    two = api.post(SCORE, json={"records": [missing, NEW_RECORDS[1]]})
    assert one.status_code == 422 and one.json() == two.json()
