"""Alerts: stored with time, measure, value and threshold; listed; idempotent evaluation;
counted in /metrics (prometheus-client text format)."""

from __future__ import annotations

from pathlib import Path

from prometheus_client.parser import text_string_to_metric_families

from tests.dashboard._fill import MODEL, draw_outcomes, fit, make_api, post_outcomes, score


def test_alerts_are_stored_once_listed_and_counted_in_metrics(tmp_path: Path) -> None:
    api = make_api(tmp_path)
    try:
        fit(api)
        s = score(api, 3000, seed=131, age_shift=45.0)
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=132, logit_shift=1.0))
        first = api.get(f"/risk-models/{MODEL}/drift").json()
        raised = first["alerts"]["raised_now"]
        measures = {a["measure"] for a in raised}
        assert {"psi:age_years", "cusum_up", "calibration_in_the_large"} <= measures
        again = api.get(f"/risk-models/{MODEL}/drift").json()
        assert again["alerts"]["raised_now"] == []  # same data, same conditions: nothing new
        assert len(again["alerts"]["conditions"]) == len(first["alerts"]["conditions"])
        listed = api.get(f"/risk-models/{MODEL}/alerts").json()
        assert listed["count"] == len(raised) == listed["open"]
        a = next(x for x in listed["items"] if x["measure"] == "calibration_in_the_large")
        assert a["value"] > a["threshold"] == 0.2 and a["direction"] == "above"
        assert (
            a["raised_at"].endswith("Z") and a["window"]["start"] and a["details"]["ci_lower"] > 0.2
        )
        assert listed["thresholds"]["alert_psi"] == 0.25
        metrics = api.get("/metrics").text
        counted = {
            s.labels["measure"]: s.value
            for fam in text_string_to_metric_families(metrics)
            if fam.name == "riskfit_alerts_raised"
            for s in fam.samples
            if s.name.endswith("_total")
        }
        assert sum(counted.values()) == len(raised) and counted["psi:age_years"] == 1
        assert f'riskfit_alerts_open{{model="{MODEL}"}} {float(len(raised))}' in metrics
        assert api.get(f"/risk-models/{MODEL}/alerts", params={"limit": 0}).status_code == 422
    finally:
        api.close()
