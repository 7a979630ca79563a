"""The demo runner against the real app (fresh SQLite file per test), in-process and live."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import pytest
import statsmodels.api as sm

from service.app import create_app
from service.cli.keys import create_key_in_store
from service.config import Settings
from service.demo import DemoError, generate_segments, run_demo, seed_database
from service.demo.inprocess import in_process_client
from tests.demo._live import free_port, live_server
from tests.demo.test_scenario import _design

SEED, N = 5, 2_000
STEPS = {"fit", "score", "outcomes", "calibration", "drift", "refit"}


@pytest.fixture(scope="module")
def client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[httpx.Client]:
    """One app on a fresh SQLite file for the module; the demo below runs on it once."""
    db = tmp_path_factory.mktemp("demo") / "riskfit.db"
    with in_process_client(create_app(Settings(database_url=f"sqlite:///{db}"))) as c:
        yield c


@pytest.fixture(scope="module")
def demo(client: httpx.Client) -> tuple[Any, list[str]]:
    lines: list[str] = []
    return run_demo(client, seed=SEED, n_train=N, log=lines.append), lines


def test_demo_fits_the_model_the_statsmodels_way(
    client: httpx.Client, demo: tuple[Any, list[str]]
) -> None:
    summary, _ = demo
    assert summary.fitted_version == 1 and summary.n_train == N
    model = client.get("/risk-models/water-mains").json()
    # version 1 is the demo's fit; a refit (when the service has refits) may add version 2
    assert model["n_versions"] == 1 + (
        "refit" in summary.steps and summary.refit["version_written"]
    )
    terms = {
        t["name"]: t
        for t in client.get("/risk-models/water-mains/versions/1").json()["term_table"]["terms"]
    }
    # external reference: statsmodels.api.Logit on the same seeded year-one segments
    year_one = generate_segments(N, year=1, seed=SEED)
    X, names = _design(year_one)
    ref = sm.Logit(year_one["outcome"], X).fit(disp=0, tol=1e-12)
    assert sorted(terms) == sorted(names)
    for name, coef, se in zip(names, ref.params, ref.bse, strict=True):
        assert terms[name]["estimate"] == pytest.approx(coef, abs=1e-6), name
        assert terms[name]["std_error"] == pytest.approx(se, rel=1e-5), name
    # ... and its predictions for the year-two segments the demo scored
    X2, _ = _design(generate_segments(N, year=2, seed=SEED))
    assert summary.mean_predicted == pytest.approx(float(np.mean(ref.predict(X2))), abs=1e-9)
    assert summary.n_scored == N


def test_every_step_is_done_or_skipped_with_its_reason(demo: tuple[Any, list[str]]) -> None:
    summary, lines = demo
    text = "\n".join(lines)
    assert {"fit", "score"} <= set(summary.steps) <= STEPS
    assert len(summary.skipped) == len(STEPS) - len(summary.steps)
    for reason in summary.skipped:
        assert "the service has no" in reason and reason in text
    assert "Year one" in text and "broke" in text and "observed / expected" in text
    assert summary.n_breaks_year2 == generate_segments(N, year=2, seed=SEED)["outcome"].sum()
    if "outcomes" in summary.steps:
        assert summary.n_outcomes == N


def test_the_monitor_flags_year_two_and_the_refit_updates(demo: tuple[Any, list[str]]) -> None:
    # DESIGN.md: in year two "the monitor must flag drift and the scheduled refit must choose
    # an update"; steps the service does not offer yet are skipped by the runner
    summary, _ = demo
    if summary.calibration is None or summary.drift is None or summary.refit is None:
        pytest.skip(f"the service lacks monitoring or refits: {summary.skipped}")
    oe = summary.calibration["measures"]["observed_expected"]
    assert oe["ci_lower"] > 1.0  # year-one risks under-predict the harsher winter
    assert summary.drift["alerts"]["conditions"], "the drift report finds alert conditions"
    assert summary.refit["method_chosen"] in {"intercept", "recalibrate", "refit"}
    assert summary.refit["reasons"]


def test_a_second_run_writes_nothing(client: httpx.Client, demo: tuple[Any, list[str]]) -> None:
    before = client.get("/risk-models/water-mains").json()
    again = run_demo(client, seed=SEED, n_train=N, log=lambda _: None)
    assert again.fitted_version is None and again.steps == ()
    assert "already exists" in again.skipped[0]
    assert client.get("/risk-models/water-mains").json() == before


def test_a_busy_store_is_retried_then_reported(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("service.demo.runner.RETRY_PAUSES", (0.0, 0.0))
    calls: list[str] = []

    def answer(request: httpx.Request) -> httpx.Response:
        if request.url.path == "/openapi.json":
            return httpx.Response(200, json={"paths": {}})
        if request.method == "GET":
            return httpx.Response(404, json={})
        calls.append(request.url.path)
        return httpx.Response(503, json={"error": {"code": "store_unavailable"}})

    stub = httpx.Client(transport=httpx.MockTransport(answer), base_url="http://t")
    with stub, pytest.raises(DemoError, match="answered 503"):
        run_demo(stub, seed=SEED, n_train=300, log=lambda _: None)
    assert calls == ["/risk-models/water-mains/versions"] * 3


def test_a_refusal_raises_with_the_service_answer() -> None:
    def answer(request: httpx.Request) -> httpx.Response:
        if request.url.path == "/openapi.json":
            return httpx.Response(200, json={"paths": {"/risk-models/{model}/versions": {}}})
        if request.method == "GET":
            return httpx.Response(404, json={"error": {"code": "model_not_found"}})
        return httpx.Response(422, json={"error": {"code": "invalid_spec", "field": "x"}})

    stub = httpx.Client(transport=httpx.MockTransport(answer), base_url="http://t")
    with stub, pytest.raises(DemoError, match=r"answered 422.*invalid_spec"):
        run_demo(stub, seed=SEED, n_train=300, log=lambda _: None)


def test_no_server_is_a_demo_error_naming_the_url() -> None:
    url = f"http://127.0.0.1:{free_port()}"
    with pytest.raises(DemoError, match=r"no riskfit answers at http://127\.0\.0\.1:\d+"):
        run_demo(url=url, n_train=300, log=lambda _: None)


def test_seed_database_then_the_url_path_against_a_live_server(tmp_path: Path) -> None:
    db = tmp_path / "riskfit.db"
    settings = Settings(database_url=f"sqlite:///{db}")  # keys required (the default)
    seeded = seed_database(settings, seed=SEED, n_train=N, log=lambda _: None)
    assert seeded.fitted_version == 1
    key = create_key_in_store(settings.database_url, role="modeler", name="test").key
    with live_server(settings) as url:
        headers = {"Authorization": f"Bearer {key}"}
        before = httpx.get(f"{url}/risk-models/water-mains", headers=headers).json()
        lines: list[str] = []
        again = run_demo(url=url, seed=SEED, n_train=N, log=lines.append, api_key=key)
        assert url in lines[0] and "already exists" in again.skipped[0]
        assert httpx.get(f"{url}/risk-models/water-mains", headers=headers).json() == before


def test_a_server_that_wants_a_key_is_a_demo_error_saying_so(tmp_path: Path) -> None:
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'riskfit.db'}", auth_required=True)
    with live_server(settings) as url, pytest.raises(DemoError, match="API key"):
        run_demo(url=url, seed=SEED, n_train=300, log=lambda _: None)
