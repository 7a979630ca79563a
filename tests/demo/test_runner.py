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


@pytest.fixture
def client(tmp_path: Path) -> Iterator[httpx.Client]:
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'riskfit.db'}")
    with in_process_client(create_app(settings)) as c:
        yield c


@pytest.fixture
def demo(client: httpx.Client) -> tuple[Any, list[str]]:
    lines: list[str] = []
    return run_demo(client, seed=SEED, n_train=N, log=lines.append), lines


def test_demo_fits_the_model_the_statsmodels_way(
    client: httpx.Client, demo: tuple[Any, list[str]]
) -> None:
    summary, _ = demo
    assert summary.fitted_version == 1 and summary.n_train == N
    model = client.get("/risk-models/water-mains").json()
    assert model["champion_version"] == 1 and model["n_versions"] == 1
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


def test_a_second_run_writes_nothing(client: httpx.Client, demo: tuple[Any, list[str]]) -> None:
    lines: list[str] = []
    again = run_demo(client, seed=SEED, n_train=N, log=lines.append)
    assert again.fitted_version is None and again.steps == ()
    assert "already exists" in again.skipped[0]
    assert client.get("/risk-models/water-mains").json()["n_versions"] == 1


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
    seeded = seed_database(
        Settings(database_url=f"sqlite:///{db}"), seed=SEED, n_train=N, log=lambda _: None
    )
    assert seeded.fitted_version == 1
    key = create_key_in_store(f"sqlite:///{db}", role="modeler", name="test").key  # access
    with live_server(db) as url:
        lines: list[str] = []
        again = run_demo(url=url, seed=SEED, n_train=N, log=lines.append, api_key=key)
        assert url in lines[0] and "already exists" in again.skipped[0]
        assert httpx.get(f"{url}/risk-models/water-mains").json()["champion_version"] == 1
