"""Per-model alert thresholds: defaults from settings, overrides stored per model, audited,
used by the next drift evaluation; bad pairs refused naming the field (common practice:
an alert threshold is a per-model operating choice, the defaults are documented settings)."""

from __future__ import annotations

from pathlib import Path

from sqlalchemy import select

from models_store.orm import AuditEvent
from tests.dashboard._fill import MODEL, draw_outcomes, fit, make_api, post_outcomes, score

URL = f"/risk-models/{MODEL}/alert-thresholds"


def test_defaults_overrides_and_their_effect_on_alerts(tmp_path: Path) -> None:
    api = make_api(tmp_path)
    try:
        fit(api)
        s = score(api, 1500, seed=211, age_shift=6.0)  # a mild input shift
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=212))
        view = api.get(URL).json()
        assert view["overrides"] == {} and view["effective"] == view["defaults"]
        assert view["defaults"]["psi"] == 0.25  # Settings.alert_psi default
        psi_age = next(
            f["psi"]
            for f in api.get(f"/risk-models/{MODEL}/drift").json()["input_drift"]["features"]
            if f["feature"] == "age_years"
        )
        assert 0.0 < psi_age < 0.25  # below the default: no PSI alert
        listed = api.get(f"/risk-models/{MODEL}/alerts").json()
        assert not any(a["measure"] == "psi:age_years" for a in listed["items"])

        lowered = round(psi_age / 2, 6)
        put = api.put(URL, json={"psi": lowered})
        assert put.status_code == 200, put.text
        assert put.json()["effective"]["psi"] == lowered and put.json()["overrides"] == {
            "psi": lowered
        }
        raised = api.get(f"/risk-models/{MODEL}/drift").json()["alerts"]["raised_now"]
        alert = next(a for a in raised if a["measure"] == "psi:age_years")
        assert alert["threshold"] == lowered
        assert api.get(f"/risk-models/{MODEL}/alerts").json()["thresholds"]["alert_psi"] == lowered

        with api.app.state.session_factory() as session:
            events = session.scalars(
                select(AuditEvent).where(AuditEvent.action == "alert_thresholds.change")
            ).all()
        assert len(events) == 1 and events[0].details["after"] == {"psi": lowered}

        back = api.put(URL, json={})  # no names: every threshold back to its default
        assert back.json()["overrides"] == {} and back.json()["effective"]["psi"] == 0.25
    finally:
        api.close()


def test_inconsistent_or_out_of_range_thresholds_are_refused(tmp_path: Path) -> None:
    api = make_api(tmp_path)
    try:
        fit(api)
        r = api.put(URL, json={"slope_low": 1.3})  # above the default slope_high 1.25
        assert r.status_code == 422
        err = r.json()["error"]
        assert err["field"] == "slope_low" and err["value"] == 1.3 and "slope_high" in err["remedy"]
        r = api.put(URL, json={"psi": -1})
        assert r.status_code == 422 and r.json()["error"]["field"] == "psi"
        r = api.put(URL, json={"psi": 0.1, "colour": "red"})
        assert r.status_code == 422 and r.json()["error"]["field"] == "colour"
        assert api.get(URL).json()["overrides"] == {}  # nothing stored by a refused request
        assert api.put("/risk-models/nope/alert-thresholds", json={}).status_code == 404
    finally:
        api.close()
