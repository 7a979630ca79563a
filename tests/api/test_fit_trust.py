"""A fit that exists is answered; a fit that cannot be done is refused before it costs anything.

* A raw-unit covariate with a tiny range gives a large but finite coefficient: the odds-ratio
  limit ``exp(b + z se)`` overflows a double. The fit answers 201 with finite log-odds values
  (checked against statsmodels' ``Logit``), the overflowing odds ratios null and named in the
  warnings, and the version reads back (200).
* A version is committed only with an answer that can be built: a failure while building it
  leaves no row.
* Rows stored by older code with nulls in the term table and fit statistics read back.
* Two 200-level categorical features and their interaction (40,000 terms, a ~10 KB request)
  are refused with 422 before any design matrix is built; so are fits over ``max_terms`` and
  over the memory budget, on every fit path (JSON, multipart, server path).
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import statsmodels.api as sm

from models_store import add_version, create_model, make_session_factory
from service.app import create_app
from service.config import Settings
from tests.api.conftest import ApiClient, row_count
from tests.store.dbfixtures import sqlite_url, version_fields

FIT = "/risk-models/tiny-range/versions"
# exp() overflows a double above log(DBL_MAX) = 709.78... (IEEE 754 binary64; common practice)
MAX_LOG_ODDS_RATIO = float(np.log(np.finfo(np.float64).max))


def _raw_unit(seed: int = 1, n: int = 300) -> dict[str, list[float]]:
    """``x`` in raw units varying in its third decimal (range 0.01): coefficient ~ 600/unit."""
    rng = np.random.default_rng(seed)
    x = 12.345 + rng.uniform(0.0, 0.01, n)
    z = rng.normal(size=n)
    eta = -1.0 + 600.0 * (x - 12.35) + 0.5 * z
    y = (rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    return {"x": x.tolist(), "z": z.tolist(), "outcome": y.tolist()}


RAW_SPEC: dict[str, Any] = {
    "features": [{"name": "x", "kind": "numeric"}, {"name": "z", "kind": "numeric"}],
    "outcome": "outcome",
}


def test_overflowing_odds_ratio_answers_201_and_reads_back(api: ApiClient) -> None:
    cols = _raw_unit()
    r = api.post(FIT, json={**RAW_SPEC, "data": {"columns": cols}})
    assert r.status_code == 201, r.text
    body = r.json()
    terms = {t["name"]: t for t in body["term_table"]["terms"]}
    # Independent solver: statsmodels' Logit (Newton MLE), same design.
    X = sm.add_constant(np.column_stack([cols["x"], cols["z"]]))
    ref = sm.Logit(np.asarray(cols["outcome"]), X).fit(disp=0, method="newton", maxiter=200)
    est = [terms[n]["estimate"] for n in ("intercept", "x", "z")]
    se = [terms[n]["std_error"] for n in ("intercept", "x", "z")]
    np.testing.assert_allclose(est, ref.params, rtol=1e-6)
    np.testing.assert_allclose(se, ref.bse, rtol=1e-5)
    x = terms["x"]
    # this seed makes both the estimate and the upper limit overflow exp(); the lower does not
    assert x["estimate"] > MAX_LOG_ODDS_RATIO and x["ci_upper"] > MAX_LOG_ODDS_RATIO
    assert x["ci_lower"] < MAX_LOG_ODDS_RATIO
    assert x["odds_ratio"] is None and x["odds_ratio_ci_upper"] is None
    assert x["odds_ratio_ci_lower"] == pytest.approx(np.exp(x["ci_lower"]), rel=1e-12)
    for t in terms.values():  # the log-odds values are always finite
        for k in ("estimate", "std_error", "z", "p_value", "ci_lower", "ci_upper"):
            assert t[k] is not None and np.isfinite(t[k]), (t["name"], k)
    assert terms["intercept"]["odds_ratio"] == 0.0  # exp(-9181) underflows to zero: finite
    assert any("'x'" in w and "overflows" in w for w in body["warnings"])
    assert not any("'z'" in w for w in body["warnings"])
    got = api.get(f"{FIT}/1")
    assert got.status_code == 200, got.text
    assert got.json() == body
    assert row_count(api, "model_version") == 1


def test_profile_limits_of_the_same_fit_answer_and_read_back(api: ApiClient) -> None:
    options = {"profile_intervals": True}
    r = api.post(FIT, json={**RAW_SPEC, "options": options, "data": {"columns": _raw_unit()}})
    assert r.status_code == 201, r.text
    x = {t["name"]: t for t in r.json()["term_table"]["terms"]}["x"]
    assert x["ci_lower"] < x["estimate"] < x["ci_upper"]  # profile limits bracket the MLE
    assert x["odds_ratio"] is None and x["odds_ratio_ci_upper"] is None
    assert api.get(f"{FIT}/1").json() == r.json()


def test_odds_ratio_is_null_exactly_where_exp_overflows() -> None:
    from service.stats.inference import odds_ratio

    top = MAX_LOG_ODDS_RATIO
    assert odds_ratio(top) == pytest.approx(float(np.finfo(np.float64).max), rel=1e-12)
    assert odds_ratio(float(np.nextafter(top, np.inf))) is None
    assert odds_ratio(float("nan")) is None and odds_ratio(float("inf")) is None
    assert odds_ratio(-800.0) == 0.0 and odds_ratio(float("-inf")) == 0.0


def test_a_failure_while_building_the_answer_leaves_no_version(
    api: ApiClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    import service.version_store as vs

    def broken(*_: Any) -> Any:
        raise RuntimeError("answer cannot be built")

    before = (row_count(api, "model_version"), row_count(api, "risk_model"))
    monkeypatch.setattr(vs, "version_answer", broken)
    r = api.post(FIT, json={**RAW_SPEC, "data": {"columns": _raw_unit(seed=4)}})
    assert r.status_code == 500
    assert (row_count(api, "model_version"), row_count(api, "risk_model")) == before == (0, 0)
    assert row_count(api, "champion_change") == 0
    monkeypatch.undo()
    r = api.post(FIT, json={**RAW_SPEC, "data": {"columns": _raw_unit(seed=4)}})
    assert r.status_code == 201 and r.json()["number"] == 1  # no number was taken


def test_rows_stored_with_nulls_by_older_code_read_back(api: ApiClient) -> None:
    fields = version_fields()
    table = json.loads(json.dumps(fields["term_table"]))
    for t in table["terms"]:
        for k in ("std_error", "z", "p_value", "ci_lower", "ci_upper", "odds_ratio"):
            t[k] = None
        t["odds_ratio_ci_lower"] = t["odds_ratio_ci_upper"] = None
    stats = dict(fields["fit_stats"])
    for k in ("loglik", "null_loglik", "deviance", "aic", "bic", "mcfadden_r2"):
        stats[k] = None
    stats["global_lr_test"] = {"name": "global", "statistic": None, "df": 1, "p_value": None}
    factory = make_session_factory(api.app.state.engine)
    with factory() as s:
        m = create_model(session=s, name="legacy", description="")
        add_version(session=s, model=m, **{**fields, "term_table": table, "fit_stats": stats})
        s.commit()
    r = api.get("/risk-models/legacy/versions/1")
    assert r.status_code == 200, r.text
    assert r.json()["term_table"]["terms"][1]["odds_ratio_ci_upper"] is None


# --- size refused before anything of size n x p or p x p exists --------------------------------


def _levels_body(levels: int, n: int, seed: int = 0) -> dict[str, Any]:
    """Two categorical features with ``levels`` levels each and their interaction."""
    rng = np.random.default_rng(seed)
    a = [f"a{i % levels}" for i in range(n)]
    b = [f"b{j}" for j in rng.permutation(n) % levels]
    y = rng.integers(0, 2, n).tolist()
    return {
        "features": [{"name": "a", "kind": "categorical"}, {"name": "b", "kind": "categorical"}],
        "interactions": [["a", "b"]],
        "outcome": "outcome",
        "data": {"columns": {"a": a, "b": b, "outcome": y}},
    }


@pytest.fixture
def no_design(monkeypatch: pytest.MonkeyPatch) -> None:
    """Building a design matrix fails the test: the refusal must come before it."""

    def refuse(*_: Any, **__: Any) -> Any:
        raise AssertionError("design_matrix was called for a fit that should be refused")

    import service.fitting
    import service.sources.blocks

    monkeypatch.setattr(service.fitting, "design_matrix", refuse)
    monkeypatch.setattr(service.sources.blocks, "design_matrix", refuse)


def _refusal(r: Any) -> dict[str, Any]:
    assert r.status_code == 422, r.text
    err: dict[str, Any] = r.json()["error"]
    assert err["remedy"]
    return err


@pytest.mark.usefixtures("no_design")
def test_interaction_of_two_200_level_features_is_refused_before_any_matrix(
    api: ApiClient,
) -> None:
    body = _levels_body(200, 400)
    assert len(json.dumps(body)) < 12_000  # a ~10 KB request
    err = _refusal(api.post(FIT, json=body))
    # 1 + 199 + 199 + 199 * 199 = 40,000 terms for 400 rows
    assert err["details"]["terms"] == 40_000 and err["details"]["rows"] == 400
    assert err["field"] == "interactions[0]"
    assert "a:b 39601" in err["message"] and "400 rows" in err["message"]
    assert "merge rare levels" in err["remedy"]
    assert row_count(api, "model_version") == 0


@pytest.mark.usefixtures("no_design")
def test_more_terms_than_the_setting_is_refused(api: ApiClient) -> None:
    body = _levels_body(40, 4000)  # 1 + 39 + 39 + 1521 = 1600 terms, fewer than the rows
    err = _refusal(api.post(FIT, json=body))
    assert err["code"] == "limit_exceeded"
    assert err["details"]["setting"] == "max_terms" and err["details"]["terms"] == 1600
    assert "RISKFIT_MAX_TERMS" in err["remedy"]
    # the same spec as a CSV upload
    buf = io.StringIO()
    w = csv.writer(buf)
    cols = body["data"]["columns"]
    w.writerow(list(cols))
    w.writerows(zip(*cols.values(), strict=True))
    spec = {k: v for k, v in body.items() if k != "data"}
    r = api.post(
        FIT,
        data={"spec": json.dumps(spec)},
        files={"data": ("d.csv", buf.getvalue().encode(), "text/csv")},
    )
    assert _refusal(r)["details"]["setting"] == "max_terms"


@pytest.fixture
def small_budget(tmp_path: Path) -> Iterator[tuple[ApiClient, Path]]:
    root = tmp_path / "data"
    root.mkdir()
    settings = Settings(
        database_url=sqlite_url(tmp_path),
        auth_required=False,
        fit_memory_budget_mb=64,
        fit_data_dirs=[str(root)],
    )
    client = ApiClient(create_app(settings))
    try:
        yield client, root
    finally:
        client.close()


@pytest.mark.usefixtures("no_design")
def test_a_fit_over_the_memory_budget_is_refused_on_every_path(
    small_budget: tuple[ApiClient, Path],
) -> None:
    api, root = small_budget
    body = _levels_body(25, 3000)  # 1 + 24 + 24 + 576 = 625 terms: ~120 MB estimated
    err = _refusal(api.post(FIT, json=body))
    assert err["details"]["setting"] == "fit_memory_budget_mb"
    assert err["details"]["estimated_mb"] > 64 and err["details"]["terms"] == 625
    cols = body["data"]["columns"]
    with (root / "d.csv").open("w", newline="") as f:
        w = csv.writer(f)
        w.writerow(list(cols))
        w.writerows(zip(*cols.values(), strict=True))
    spec = {k: v for k, v in body.items() if k != "data"}
    r = api.post(FIT, json={**spec, "data": {"path": str(root / "d.csv")}})
    err = _refusal(r)
    # streamed: one batch of rows at a time, so the p x p part decides
    assert err["details"]["setting"] == "fit_memory_budget_mb"
    assert row_count(api, "model_version") == 0
