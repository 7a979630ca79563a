"""Refits through the HTTP API on seeded scenarios with known truth (tests/cli/_refit_data.py).

External checks: the closed test's likelihood-ratio statistics are recomputed with
statsmodels ``GLM(family=Binomial())`` fits of the same nested models (intercept update with
``offset=eta_old``, recalibration on ``[1, eta_old]``, full refit; unchanged model by
``GLM.loglike`` at the champion's coefficients), to 1e-6.
"""

from __future__ import annotations

import time
from datetime import timedelta
from typing import Any

import numpy as np
import pytest
import statsmodels.api as sm
from sqlalchemy.exc import OperationalError

from models_store._types import utcnow
from models_store.models import require_model
from models_store.outcomes import add_outcomes
from models_store.refits import (
    acquire_refit_lock,
    claim_refit,
    end_refit_claim,
    refit_lock,
    start_refit_run,
)
from service.errors import RefitInProgressError
from service.refitting import lease as lease_module
from service.refitting import operation
from service.refitting.lease import LeaseKeeper
from tests.api.conftest import ApiClient, row_count, store_dump
from tests.cli._refit_data import SPEC, design, scored_records, training_columns

MODEL = "mains"
URL = f"/risk-models/{MODEL}"
BATCHES = 4  # scored in this many requests, so score times differ


def post_outcomes(api: ApiClient, items: list[dict[str, Any]]) -> None:
    """Join outcomes with the store's own ingestion (the outcomes route has its own suite)."""
    with api.app.state.session_factory() as session:
        model = require_model(session=session, name=MODEL)
        add_outcomes(session=session, model=model, items=items)
        session.commit()


def setup_model(
    api: ApiClient, truth: str, *, n_train: int = 20_000, n_new: int = 2000, seed: int = 12
) -> dict[str, Any]:
    """Fit version 1, score ``n_new`` records in batches, post their outcomes under ``truth``."""
    r = api.post(
        f"{URL}/versions", json={**SPEC, "data": {"columns": training_columns(n_train, seed)}}
    )
    assert r.status_code == 201, r.text
    records, y = scored_records(n_new, truth, seed)
    scored: list[tuple[int, str, dict[str, Any], int]] = []
    size = -(-n_new // BATCHES)
    for b in range(BATCHES):
        part = records[b * size : (b + 1) * size]
        s = api.post(f"{URL}/scores", json={"records": part})
        assert s.status_code == 200, s.text
        for i, sc in enumerate(s.json()["scores"]):
            scored.append((b, sc["score_id"], part[i], y[b * size + i]))
    post_outcomes(api, [{"score_id": sid, "outcome": out} for _, sid, _, out in scored])
    coef = np.array([t["estimate"] for t in r.json()["term_table"]["terms"]])
    return {"coef": coef, "scored": scored}


def refit(api: ApiClient, **body: Any) -> dict[str, Any]:
    r = api.post(f"{URL}/refits", json=body)
    assert r.status_code == 200, r.text
    answer: dict[str, Any] = r.json()
    return answer


def test_no_change_keeps_the_champion_and_writes_no_version(api: ApiClient) -> None:
    setup_model(api, "same")
    answer = refit(api, method="auto")
    assert answer["method_chosen"] == "unchanged"
    assert answer["decision"] == "keep" and not answer["promoted"]
    assert answer["version_written"] is False and answer["challenger_version"] is None
    assert any("LR test unchanged vs refit" in r for r in answer["reasons"])
    assert any("no new version is written" in r for r in answer["reasons"])
    assert api.get(f"{URL}/versions").json()["count"] == 1


def test_intercept_shift_picks_the_intercept_update_and_promotes(api: ApiClient) -> None:
    setup_model(api, "shift")
    answer = refit(api, method="auto", note="winter")
    assert answer["method_chosen"] == "intercept"
    tests = {t["model"]: t for t in answer["closed_test"]["tests"]}
    assert tests["unchanged"]["significant"] and not tests["intercept"]["significant"]
    # the shift of +0.8 on the logit is recovered (SE about 0.06 on 1400 records)
    assert answer["challenger"]["intercept"] == pytest.approx(0.8, abs=0.2)
    assert answer["gates"]["passed"] and answer["decision"] == "promote"
    names = " | ".join(answer["reasons"])
    for gate in ("gate log_loss", "gate brier", "gate calibration_slope", "gate auc"):
        assert gate in names
    assert "LR test intercept vs refit" in names
    v2 = api.get(f"{URL}/versions/2").json()
    assert v2["lineage"]["origin"] == "intercept" and v2["lineage"]["parent"] == 1
    assert v2["lineage"]["details"]["decision"] == "promote" and v2["note"] == "winter"
    champion = api.get(f"{URL}/champion").json()
    assert champion["version"] == 2 and champion["reason"].startswith(f"refit {answer['refit_id']}")
    assert "intercept update of version 1 promoted" in champion["reason"]


def test_too_extreme_predictions_pick_recalibration(api: ApiClient) -> None:
    setup_model(api, "slope")
    answer = refit(api)
    assert answer["method_chosen"] == "recalibrate"
    tests = {t["model"]: t for t in answer["closed_test"]["tests"]}
    assert tests["intercept"]["significant"] and not tests["recalibrate"]["significant"]
    assert answer["challenger"]["slope"] == pytest.approx(0.55, abs=0.12)
    assert "LR test recalibrate vs refit" in " | ".join(answer["reasons"])
    assert answer["decision"] == "promote"
    v2 = api.get(f"{URL}/versions/2").json()
    assert v2["lineage"]["origin"] == "recalibrate"


def test_a_new_effect_needs_the_full_refit(api: ApiClient) -> None:
    setup_model(api, "effect")
    answer = refit(api)
    assert answer["method_chosen"] == "refit"
    assert all(t["significant"] for t in answer["closed_test"]["tests"])
    assert any("full refit is chosen" in r for r in answer["reasons"])
    x3 = answer["challenger"]["coef"]["x3"]
    assert x3 == pytest.approx(0.9, abs=0.25)  # the new effect, SE about 0.08
    assert answer["decision"] == "promote"
    v2 = api.get(f"{URL}/versions/2").json()
    assert v2["lineage"]["origin"] == "refit"
    assert [d["name"] for d in v2["fit_statistics"]["drop_term_tests"]] == [
        "x1",
        "x2",
        "x3",
        "grade",
    ]
    # a full refit's drop-term rows say what they drop, as a fit's do (regression: kind was null)
    for d in v2["fit_statistics"]["drop_term_tests"]:
        assert d["kind"] is not None and d["dropped"], d


@pytest.mark.parametrize("truth", ["same", "shift", "slope", "effect"])
def test_lr_statistics_equal_statsmodels_glm_fits(api: ApiClient, truth: str) -> None:
    setup = setup_model(api, truth)
    answer = refit(api, dry_run=True)
    # the development part: the older 70 % in score order (batch, then score id)
    ordered = sorted(setup["scored"], key=lambda s: (s[0], s[1]))
    n_dev = answer["data"]["development"]["n_obs"]
    assert n_dev == len(ordered) - int(np.ceil(0.3 * len(ordered)))
    dev = ordered[:n_dev]
    cols = {k: [s[2][k] for s in dev] for k in ("x1", "x2", "x3", "grade")}
    X, y = design(cols), np.array([s[3] for s in dev], dtype=float)
    eta_old = X @ setup["coef"]
    fam = sm.families.Binomial()
    # statsmodels GLM(Binomial): log-likelihoods of the four nested models
    ll = {
        "unchanged": sm.GLM(y, X, family=fam).loglike(setup["coef"]),
        "intercept": sm.GLM(y, np.ones((y.size, 1)), family=fam, offset=eta_old).fit().llf,
        "recalibrate": sm.GLM(y, np.column_stack([np.ones(y.size), eta_old]), family=fam).fit().llf,
        "refit": sm.GLM(y, X, family=fam).fit().llf,
    }
    df = {"unchanged": 6, "intercept": 5, "recalibrate": 4}
    assert answer["closed_test"]["tests"], "the closed test made no test"
    for t in answer["closed_test"]["tests"]:
        expected = 2.0 * (ll["refit"] - ll[t["model"]])
        assert t["statistic"] == pytest.approx(expected, rel=1e-6, abs=1e-6)
        assert t["df"] == df[t["model"]]
    models = {m["method"]: m for m in answer["closed_test"]["models"]}
    for name, value in ll.items():
        assert models[name]["loglik"] == pytest.approx(value, rel=1e-9, abs=1e-6)


def test_same_refit_on_same_data_is_answered_again(api: ApiClient) -> None:
    setup_model(api, "shift")
    first = refit(api)
    versions = row_count(api, "model_version")
    second = refit(api)
    assert second["replayed"] is True and first["replayed"] is False
    assert second["refit_id"] == first["refit_id"]
    assert second["challenger_version"] == first["challenger_version"] == 2
    assert row_count(api, "model_version") == versions
    assert row_count(api, "refit_run") == 1
    # a different request on the same data is a new refit (here: against champion 2)
    third = refit(api, alpha=0.01)
    assert third["refit_id"] != first["refit_id"] and third["champion_before"] == 2


def test_dry_run_writes_nothing(api: ApiClient) -> None:
    setup_model(api, "effect")
    before = store_dump(api)
    answer = refit(api, dry_run=True)
    assert answer["dry_run"] and answer["decision"] == "promote"
    assert answer["refit_id"] is None and answer["challenger_version"] is None
    assert store_dump(api) == before


def test_a_refit_while_another_holds_the_lock_gets_409(api: ApiClient) -> None:
    setup_model(api, "shift", n_new=400)
    engine = api.app.state.engine
    with api.app.state.session_factory() as session:
        model_id = require_model(session=session, name=MODEL).id
    before = store_dump(api)
    with refit_lock(engine=engine, model_id=model_id):
        r = api.post(f"{URL}/refits", json={"method": "auto"})
        assert r.status_code == 409, r.text
        err = r.json()["error"]
        assert err["code"] == "refit_in_progress" and err["field"] == "model"
    assert store_dump(api) == before
    assert refit(api, gates={"min_outcomes": 50})["refit_id"] is not None  # lock released


def test_not_enough_outcomes_is_a_422_with_counts(api: ApiClient) -> None:
    setup_model(api, "same", n_new=200)
    r = api.post(f"{URL}/refits", json={})
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["code"] == "not_enough_outcomes" and err["field"] == "window"
    assert err["details"]["n_outcomes"] == 200
    assert (
        err["details"]["holdout"]["n_obs"] == 60 and err["details"]["development"]["n_obs"] == 140
    )
    assert "holdout part has 60 outcomes" in err["message"]
    assert row_count(api, "model_version") == 1
    runs = api.get(f"{URL}/refits").json()["items"]
    assert runs[0]["status"] == "failed" and runs[0]["error"]["code"] == "not_enough_outcomes"


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ({"method": "everything"}, "method"),
        ({"pool_training_data": True}, "pool_training_data"),
        ({"holdout_fraction": 0.95}, "holdout_fraction"),
        ({"since": "2025-01-01T00:00:00"}, "since"),
        ({"gates": {"slope_bounds": [1.2, 0.8]}}, "gates"),
        ({"gates": {"auc_marginn": 0.1}}, "gates.auc_marginn"),
    ],
)
def test_bad_requests_name_the_field(api: ApiClient, body: dict[str, Any], field: str) -> None:
    setup_model(api, "same", n_new=40)
    before = store_dump(api)
    r = api.post(f"{URL}/refits", json=body)
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"].startswith(field) and err["remedy"]
    assert store_dump(api) == before


# --- the refit lock's lease (models_store/refits.py, service/refitting/lease.py) ----------------


def _model_id(api: ApiClient) -> int:
    with api.app.state.session_factory() as session:
        return require_model(session=session, name=MODEL).id


def test_a_refit_that_lost_its_lock_stores_nothing(
    api: ApiClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Another refit takes the lock over while this one decides (as after a lease ran out
    without renewal): the storing transaction finds its token gone and writes no version."""
    setup_model(api, "shift", n_new=400)
    engine, model_id = api.app.state.engine, _model_id(api)
    real_decide = operation.decide

    def decide_after_a_takeover(*args: Any, **kwargs: Any) -> Any:
        later = utcnow() + timedelta(hours=2)  # past any lease: the lock is taken over
        acquire_refit_lock(engine=engine, model_id=model_id, now=later)
        return real_decide(*args, **kwargs)

    monkeypatch.setattr(operation, "decide", decide_after_a_takeover)
    r = api.post(f"{URL}/refits", json={"gates": {"min_outcomes": 50}})
    assert r.status_code == 409, r.text
    err = r.json()["error"]
    assert err["code"] == "refit_in_progress" and "lost the model's refit lock" in err["message"]
    assert row_count(api, "model_version") == 1
    runs = api.get(f"{URL}/refits").json()["items"]
    assert [run["status"] for run in runs] == ["failed"]  # failed by the refit that took over
    assert runs[0]["error"]["code"] == "refit_interrupted"


def test_an_interrupted_refit_is_listed_failed_with_its_reason(api: ApiClient) -> None:
    """A holder that died (its lease ran out long ago) left its run ``running``: the next
    refit takes the lock over and the list shows the dead run failed, with why."""
    setup_model(api, "shift", n_new=400)
    engine, model_id = api.app.state.engine, _model_id(api)
    acquire_refit_lock(
        engine=engine, model_id=model_id, ttl_seconds=60, now=utcnow() - timedelta(hours=2)
    )
    with api.app.state.session_factory() as session:
        model = require_model(session=session, name=MODEL)
        dead = start_refit_run(session=session, model=model, request_fingerprint="d" * 64).id
        session.commit()
    assert refit(api, gates={"min_outcomes": 50})["refit_id"] == dead + 1
    listed = api.get(f"{URL}/refits")
    assert listed.status_code == 200, listed.text
    runs = {run["refit_id"]: run for run in listed.json()["items"]}
    assert runs[dead]["status"] == "failed" and runs[dead + 1]["status"] == "succeeded"
    error = runs[dead]["error"]
    assert error["code"] == "refit_interrupted" and "stopped renewing" in error["message"]
    one = api.get(f"{URL}/refits/{dead}")
    assert one.status_code == 200 and one.json()["result"]["error"] == error


def test_the_heartbeat_keeps_the_lease_and_notices_a_takeover(api: ApiClient) -> None:
    setup_model(api, "same", n_new=40)
    engine, model_id = api.app.state.engine, _model_id(api)
    claim = claim_refit(
        engine=engine, model_id=model_id, request_fingerprint="h" * 64, lease_seconds=0.6
    )
    with LeaseKeeper(engine, claim, interval=0.15) as keeper:
        time.sleep(1.5)  # 2.5 leases: held only because it is renewed
        with pytest.raises(RefitInProgressError):
            claim_refit(engine=engine, model_id=model_id, request_fingerprint="x" * 64)
        assert keeper.renewals >= 4 and keeper.failures == 0
        keeper.check()  # still held
        acquire_refit_lock(engine=engine, model_id=model_id, now=utcnow() + timedelta(hours=1))
        assert keeper.lost.wait(5.0)
        with pytest.raises(RefitInProgressError, match="lost the model's refit lock"):
            keeper.check()
    end_refit_claim(engine=engine, claim=claim, error={"code": "test", "message": "ended"})
    runs = api.get(f"{URL}/refits").json()["items"]  # the takeover had failed it already
    assert runs[0]["status"] == "failed" and runs[0]["error"]["code"] == "refit_interrupted"


def test_a_refit_longer_than_several_leases_keeps_its_lock_and_stores(
    api: ApiClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    setup_model(api, "shift", n_new=400)
    engine, model_id = api.app.state.engine, _model_id(api)
    api.app.state.settings.refit_lock_lease_seconds = 1.0  # renewed every 1/3 s
    real_decide = operation.decide
    refused: list[str] = []

    def slow_decide(*args: Any, **kwargs: Any) -> Any:
        time.sleep(2.5)  # two and a half leases
        try:
            claim_refit(engine=engine, model_id=model_id, request_fingerprint="y" * 64)
        except RefitInProgressError as exc:
            refused.append(exc.details["lease_expires"])
        return real_decide(*args, **kwargs)

    monkeypatch.setattr(operation, "decide", slow_decide)
    answer = refit(api, gates={"min_outcomes": 50})
    assert len(refused) == 1  # the lease was still held, by renewals alone
    assert answer["version_written"] and answer["challenger_version"] == 2
    assert row_count(api, "refit_lock") == 0 and row_count(api, "model_version") == 2


def test_failed_renewals_do_not_stop_the_heartbeat(
    api: ApiClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A renewal that raises (a database busy past its timeout) is logged and retried."""
    setup_model(api, "same", n_new=40)
    engine, model_id = api.app.state.engine, _model_id(api)
    claim = claim_refit(
        engine=engine, model_id=model_id, request_fingerprint="r" * 64, lease_seconds=3.0
    )
    calls = {"n": 0}
    real_renew = lease_module.renew_refit_claim

    def flaky_renew(**kwargs: Any) -> bool:
        calls["n"] += 1
        if calls["n"] <= 2:
            raise OperationalError("UPDATE refit_lock", {}, Exception("database is locked"))
        return real_renew(**kwargs)

    monkeypatch.setattr(lease_module, "renew_refit_claim", flaky_renew)
    with LeaseKeeper(engine, claim, interval=0.15) as keeper:
        deadline = time.monotonic() + 10.0
        while keeper.renewals < 2 and time.monotonic() < deadline:
            time.sleep(0.05)
    assert keeper.failures == 2 and keeper.renewals >= 2 and not keeper.lost.is_set()
    end_refit_claim(engine=engine, claim=claim, discard_run=True)
    assert row_count(api, "refit_lock") == 0 and row_count(api, "refit_run") == 0
