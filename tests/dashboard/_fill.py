"""Helpers for the monitoring suites: an app on a fresh SQLite file, a fitted model, scored
records and outcomes drawn from a known truth (the returned probabilities, optionally shifted
on the logit scale), all through the HTTP API."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from service.app import create_app
from service.config import Settings
from tests.api._data import fit_body, rows_of, segments
from tests.api.conftest import ApiClient

MODEL = "water-mains"
BATCH = 5000  # records per scoring / outcome request (below the request limit)


def monitor_settings(database_url: str, **overrides: Any) -> Settings:
    """Settings for the monitoring tests: access control off, a cheaper CUSUM simulation."""
    values: dict[str, Any] = {"database_url": database_url, "cusum_n_sims": 50}
    if "auth_required" in Settings.model_fields:
        values["auth_required"] = False
    values.update(overrides)
    return Settings(**values)


def make_api(tmp_path: Path, **overrides: Any) -> ApiClient:
    return ApiClient(create_app(monitor_settings(f"sqlite:///{tmp_path / 'm.db'}", **overrides)))


@contextmanager
def fitted_api(tmp_path: Path, **overrides: Any) -> Iterator[ApiClient]:
    """An app on a fresh SQLite file with model ``MODEL`` fitted (version 1); closed after."""
    client = make_api(tmp_path, **overrides)
    try:
        fit(client)
        yield client
    finally:
        client.close()


def fit(api: ApiClient, seed: int = 7, n: int = 1500) -> dict[str, Any]:
    r = api.post(f"/risk-models/{MODEL}/versions", json=fit_body(segments(n, seed)))
    assert r.status_code == 201, r.text
    body: dict[str, Any] = r.json()
    return body


@dataclass
class Scored:
    ids: list[str]
    keys: list[str]
    p: np.ndarray
    records: list[dict[str, Any]]


def score(
    api: ApiClient, n: int, seed: int, *, age_shift: float = 0.0, key_prefix: str = "s"
) -> Scored:
    cols = segments(n, seed)
    cols.pop("outcome")
    cols["age_years"] = [a + age_shift for a in cols["age_years"]]
    records = rows_of(cols)
    keys = [f"{key_prefix}-{seed}-{i}" for i in range(n)]
    ids: list[str] = []
    p: list[float] = []
    for a in range(0, n, BATCH):
        part = [
            {**r, "key": k}
            for r, k in zip(records[a : a + BATCH], keys[a : a + BATCH], strict=True)
        ]
        r = api.post(f"/risk-models/{MODEL}/scores", json={"records": part})
        assert r.status_code == 200, r.text
        ids += [s["score_id"] for s in r.json()["scores"]]
        p += [s["probability"] for s in r.json()["scores"]]
    return Scored(ids, keys, np.asarray(p), records)


def draw_outcomes(p: np.ndarray, seed: int, logit_shift: float = 0.0) -> np.ndarray:
    """y ~ Bernoulli(expit(logit(p) + shift)): calibrated when ``logit_shift`` is 0."""
    rng = np.random.default_rng(seed)
    eta = np.log(p) - np.log1p(-p) + logit_shift
    return (rng.uniform(size=p.shape[0]) < 1.0 / (1.0 + np.exp(-eta))).astype(int)


def post_outcomes(
    api: ApiClient, ids: list[str], y: np.ndarray, observed_at: list[str] | None = None
) -> None:
    for a in range(0, len(ids), BATCH):
        items = [
            {"score_id": i, "outcome": int(o)}
            for i, o in zip(ids[a : a + BATCH], y[a : a + BATCH], strict=True)
        ]
        if observed_at is not None:
            for item, t in zip(items, observed_at[a : a + BATCH], strict=True):
                item["observed_at"] = t
        r = api.post(f"/risk-models/{MODEL}/outcomes", json={"outcomes": items})
        assert r.status_code == 200, r.text
