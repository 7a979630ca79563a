"""Alerts: stored with time, measure, value and threshold; listed; idempotent evaluation;
counted in /metrics (prometheus-client text format); never stored twice by concurrent
evaluations (two threads, the store's unique key)."""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import Any

from prometheus_client.parser import text_string_to_metric_families

from models_store.models import require_model
from service.monitoring import LimitCache, Window, drift_view
from service.monitoring.alerts import store_new_alerts
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


def _conditions(version: int) -> list[dict[str, Any]]:
    window = {"by": "count", "start": "2026-01-01T00:00:00Z", "end": "2026-01-02T00:00:00Z"}
    return [
        {
            "measure": measure,
            "value": 0.5,
            "threshold": 0.2,
            "direction": "above",
            "version": version,
            "window": window,
            "details": {"n": 1000},
        }
        for measure in ("calibration_in_the_large", "observed_expected", "psi:age_years")
    ]


def test_two_threads_never_store_one_alert_twice(tmp_path: Path) -> None:
    # thread A stores three conditions and holds its transaction open; thread B, which has
    # not seen them, stores the same ones: B waits on the store's lock or unique index until
    # A commits, then every insert hits the unique key and B stores nothing
    api = make_api(tmp_path)
    try:
        fit(api)
        factory = api.app.state.session_factory
        found = _conditions(1)
        first, second = factory(), factory()
        model_a = require_model(session=first, name=MODEL)
        stored_a = store_new_alerts(session=first, model=model_a, found=found)
        assert len(stored_a) == 3
        result: dict[str, Any] = {}

        def other() -> None:
            try:
                model_b = require_model(session=second, name=MODEL)
                result["stored"] = store_new_alerts(session=second, model=model_b, found=found)
                second.commit()
            except BaseException as exc:  # pragma: no cover - reported by the assert
                result["error"] = exc

        worker = threading.Thread(target=other)
        worker.start()
        time.sleep(0.3)  # B is now waiting on A
        first.commit()
        worker.join(timeout=30)
        first.close()
        second.close()
        assert "error" not in result and result["stored"] == []
        listed = api.get(f"/risk-models/{MODEL}/alerts").json()
        assert listed["count"] == 3
        assert sorted(a["measure"] for a in listed["items"]) == sorted(c["measure"] for c in found)
    finally:
        api.close()


def test_concurrent_drift_evaluations_store_each_condition_once(tmp_path: Path) -> None:
    api = make_api(tmp_path)
    try:
        fit(api)
        s = score(api, 2000, seed=133, age_shift=45.0)
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=134, logit_shift=1.0))
        settings = api.app.state.settings
        start = threading.Barrier(2)
        raised: list[int] = []
        errors: list[BaseException] = []

        def evaluate() -> None:
            session = api.app.state.session_factory()
            try:
                model = require_model(session=session, name=MODEL)
                start.wait()
                _, new = drift_view(
                    session=session,
                    model=model,
                    window=Window(),
                    by="count",
                    size=None,
                    settings=settings,
                    cache=LimitCache(),
                )
                raised.append(len(new))
            except BaseException as exc:  # pragma: no cover - reported by the assert
                errors.append(exc)
            finally:
                session.close()

        threads = [threading.Thread(target=evaluate) for _ in range(2)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=120)
        assert errors == []
        listed = api.get(f"/risk-models/{MODEL}/alerts").json()
        keys = [(a["measure"], str(a["window"])) for a in listed["items"]]
        assert len(keys) == len(set(keys)) == sum(raised) > 0
    finally:
        api.close()
