"""``data.path`` fits over HTTP and ``riskfit fit --engine local``: the stored version equals an
upload of the same file (encoding, ranges, fingerprint identical; coef and cov to 1e-10; the
upload path is itself checked against statsmodels in tests/api), and only paths inside the
setting fit_data_dirs are read (outside, ``..`` and symlink escapes: 403, nothing stored)."""

from __future__ import annotations

import json
import os
import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.app import create_app
from service.config import Settings
from tests.api.conftest import ApiClient, store_dump
from tests.reliability._server import ServerProcess, riskfit_cli
from tests.scale._data import SPEC_FEATURES
from tests.store.dbfixtures import sqlite_url

SPEC: dict[str, Any] = {
    "features": SPEC_FEATURES,
    "outcome": "outcome",
    "options": {"weights": "exposure", "offset": "log_length"},
}


@pytest.fixture
def allowed(tmp_path: Path, files: dict[str, Path]) -> Path:
    root = tmp_path / "allowed"
    root.mkdir()
    shutil.copy(files["small"], root / "small.parquet")
    shutil.copy(files["csv"], root / "small.csv")
    return root


@pytest.fixture
def api(tmp_path: Path, allowed: Path) -> Iterator[ApiClient]:
    settings = Settings(
        database_url=sqlite_url(tmp_path), auth_required=False, fit_data_dirs=[str(allowed)]
    )
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()


def _by_path(api: ApiClient, model: str, path: str, **extra: Any) -> Any:
    return api.post(
        f"/risk-models/{model}/versions", json={**SPEC, "data": {"path": path, **extra}}
    )


def _upload(api: ApiClient, model: str, path: Path) -> Any:
    with path.open("rb") as f:
        return api.post(
            f"/risk-models/{model}/versions",
            data={"spec": json.dumps(SPEC)},
            files={"data": (path.name, f.read(), "application/octet-stream")},
        )


def _same_version(a: dict[str, Any], b: dict[str, Any]) -> None:
    for key in ("encoding", "training_ranges", "data_fingerprint"):
        assert a[key] == b[key], key
    ta, tb = a["term_table"]["terms"], b["term_table"]["terms"]
    np.testing.assert_allclose(
        [t["estimate"] for t in tb], [t["estimate"] for t in ta], rtol=1e-10, atol=1e-10
    )
    np.testing.assert_allclose(
        [t["std_error"] for t in tb], [t["std_error"] for t in ta], rtol=1e-10
    )
    fa, fb = a["fit_statistics"], b["fit_statistics"]
    assert fb["loglik"] == pytest.approx(fa["loglik"], rel=1e-10)
    assert fb["apparent_auc"] == pytest.approx(fa["apparent_auc"], rel=1e-12)
    assert fb["apparent_brier"] == pytest.approx(fa["apparent_brier"], rel=1e-10)
    for da, db in zip(fa["drop_term_tests"], fb["drop_term_tests"], strict=True):
        assert db["statistic"] == pytest.approx(da["statistic"], rel=1e-8, abs=1e-8)


@pytest.mark.parametrize("name", ["small.parquet", "small.csv"])
def test_path_fit_equals_upload(api: ApiClient, allowed: Path, name: str) -> None:
    by_path = _by_path(api, "streamed", str(allowed / name))
    assert by_path.status_code == 201, by_path.text
    uploaded = _upload(api, "uploaded", allowed / name)
    assert uploaded.status_code == 201, uploaded.text
    _same_version(uploaded.json(), by_path.json())


def _refused(api: ApiClient, path: str, status: int = 403) -> dict[str, Any]:
    before = store_dump(api)
    r = _by_path(api, "m", path)
    assert r.status_code == status, r.text
    assert store_dump(api) == before  # nothing stored
    body: dict[str, Any] = r.json()
    return body


def test_outside_dotdot_and_symlink_are_refused(
    api: ApiClient, allowed: Path, tmp_path: Path, files: dict[str, Path]
) -> None:
    outside = tmp_path / "outside.parquet"
    shutil.copy(files["small"], outside)
    body = _refused(api, str(outside))
    assert str(outside) in json.dumps(body) and "fit_data_dirs" in json.dumps(body)
    _refused(api, str(allowed / ".." / "outside.parquet"))
    os.symlink(outside, allowed / "link.parquet")
    body = _refused(api, str(allowed / "link.parquet"))
    assert "outside the allowed" in json.dumps(body)
    sub = allowed / "dir"
    sub.mkdir()
    os.symlink(outside, sub / "part.parquet")
    _refused(api, str(sub))
    _refused(api, "small.parquet", status=422)  # relative paths are not guessed


def test_disabled_by_default(tmp_path: Path, files: dict[str, Path]) -> None:
    client = ApiClient(create_app(Settings(database_url=sqlite_url(tmp_path), auth_required=False)))
    try:
        body = _refused(client, str(files["small"]))
        err = body["error"]
        assert "disabled" in err["message"] and "fit_data_dirs" in err["remedy"]
        assert _by_path(client, "m", str(files["small"]), engine="dask").status_code == 403
    finally:
        client.close()


@pytest.mark.slow  # > 20 s on a loaded 2-core machine
def test_riskfit_fit_by_path_end_to_end(tmp_path: Path, allowed: Path) -> None:
    url = sqlite_url(tmp_path / "cli")
    (tmp_path / "cli").mkdir(exist_ok=True)
    spec = tmp_path / "spec.json"
    spec.write_text(json.dumps(SPEC))
    env = {"RISKFIT_FIT_DATA_DIRS": json.dumps([str(allowed)])}
    with ServerProcess(url, tmp_path, env=env) as server:
        args = ["fit", "--spec", str(spec), "--url", server.base_url, "--model", "cli"]
        done = riskfit_cli(
            *args, "--data", str(allowed / "small.parquet"), "--engine", "local", database_url=url
        )
        assert done.returncode == 0, done.stdout + done.stderr
        answer = json.loads(done.stdout)
        assert answer["number"] == 1 and answer["fit_statistics"]["n_obs"] == 30_000
        refused = riskfit_cli(*args, "--data", str(spec), "--engine", "local", database_url=url)
        assert refused.returncode == 1 and "fit_data_dirs" in refused.stdout
