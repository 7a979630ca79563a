"""POST /risk-models/{model}/alerts/{alert_id}/resolution: an open alert is closed once,
audited with the acting key, and counted in /metrics; an unknown or another model's alert is
404, an already resolved one 409 (both naming ``alert_id``, the store unchanged); a drift
evaluation of the same data does not raise the resolved condition again."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from models_store.alerts import add_alert
from models_store.models import require_model
from tests.api._data import fit_body
from tests.api.conftest import ApiClient, store_dump
from tests.dashboard._fill import MODEL, draw_outcomes, fit, make_api, post_outcomes, score


def _url(model: str, alert_id: Any) -> str:
    return f"/risk-models/{model}/alerts/{alert_id}/resolution"


def _alerts(api: ApiClient, model: str, measures: tuple[str, ...]) -> list[int]:
    """Store one open alert per measure on ``model`` (as a drift evaluation would)."""
    with api.app.state.session_factory() as session:
        row = require_model(session=session, name=model)
        ids = [
            add_alert(
                session=session,
                model=row,
                measure=m,
                value=0.5,
                threshold=0.2,
                direction="above",
                version_number=1,
            ).id
            for m in measures
        ]
        session.commit()
    return ids


def test_resolving_closes_an_alert_once_and_audits_it(api: ApiClient) -> None:
    for name in ("pipes", "other"):
        assert api.post(f"/risk-models/{name}/versions", json=fit_body()).status_code == 201
    first, second = _alerts(api, "pipes", ("calibration_in_the_large", "observed_expected"))
    (foreign,) = _alerts(api, "other", ("calibration_slope",))

    r = api.post(_url("pipes", first))
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["id"] == first and body["open"] is False and body["resolved_at"].endswith("Z")
    listed = api.get("/risk-models/pipes/alerts").json()
    assert listed["open"] == 1 and [a["id"] for a in listed["items"] if a["open"]] == [second]
    events = api.get("/audit-events", params={"action": "alert.resolve"}).json()["items"]
    assert len(events) == 1 and events[0]["model"] == "pipes"
    assert events[0]["details"]["alert_id"] == first
    assert events[0]["details"]["measure"] == "calibration_in_the_large"
    metrics = api.get("/metrics").text
    assert 'riskfit_alerts_open{model="pipes"} 1.0' in metrics

    before = store_dump(api)
    again = api.post(_url("pipes", first))
    assert again.status_code == 409, again.text
    err = again.json()["error"]
    assert (err["field"], err["value"]) == ("alert_id", first) and err["remedy"]
    assert err["details"]["resolved_at"] == body["resolved_at"].replace("Z", "+00:00")
    for model, alert_id in (("pipes", 999_999), ("pipes", foreign), ("other", first)):
        missing = api.post(_url(model, alert_id))
        assert missing.status_code == 404, missing.text
        err = missing.json()["error"]
        assert (err["field"], err["value"]) == ("alert_id", alert_id) and err["remedy"]
    bad = api.post(_url("pipes", "first"))
    assert bad.status_code == 422 and "alert_id" in bad.json()["error"]["field"]
    assert api.post(_url("pipes", 0)).status_code == 422
    assert api.post(_url("nobody", first)).json()["error"]["code"] == "model_not_found"
    assert store_dump(api) == before  # refused requests changed nothing


def test_a_resolved_condition_is_not_raised_again(tmp_path: Path) -> None:
    api = make_api(tmp_path)
    try:
        fit(api)
        s = score(api, 3000, seed=231, age_shift=45.0)
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=232, logit_shift=1.0))
        raised = api.get(f"/risk-models/{MODEL}/drift").json()["alerts"]["raised_now"]
        psi = next(a for a in raised if a["measure"] == "psi:age_years")
        assert api.post(_url(MODEL, psi["id"])).json()["open"] is False
        again = api.get(f"/risk-models/{MODEL}/drift").json()
        assert any(c["measure"] == "psi:age_years" for c in again["alerts"]["conditions"])
        assert again["alerts"]["raised_now"] == []  # the condition's key stays stored
        listed = api.get(f"/risk-models/{MODEL}/alerts").json()
        assert listed["open"] == len(raised) - 1
    finally:
        api.close()


def test_the_route_is_documented_with_its_refusals(api: ApiClient) -> None:
    doc = api.get("/openapi.json").json()
    op = doc["paths"]["/risk-models/{model}/alerts/{alert_id}/resolution"]["post"]
    assert {"200", "404", "409", "422"} <= set(op["responses"])
    assert "modeler" in op["description"] and "alert.resolve" in op["description"]
    assert any(p["name"] == "alert_id" and p["in"] == "path" for p in op["parameters"])


def test_the_dashboard_counts_resolved_alerts(api: ApiClient) -> None:
    assert api.post("/risk-models/pipes/versions", json=fit_body()).status_code == 201
    first, _ = _alerts(api, "pipes", ("calibration_in_the_large", "observed_expected"))
    assert "resolved-alert-count" not in api.get("/dashboard/pipes").text
    resolved = api.post(_url("pipes", first)).json()["resolved_at"]
    html = api.get("/dashboard/pipes").text
    assert 'id="open-alert-count">1 open alert<' in html
    assert f"1 resolved alert, the latest resolved {resolved[:10]} {resolved[11:16]} UTC" in html
