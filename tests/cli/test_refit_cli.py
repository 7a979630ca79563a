"""The cron path end to end: ``riskfit refit`` as a subprocess against a live uvicorn server
on 127.0.0.1 (random free port, temporary SQLite file), with an API key as cron would have."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from models_store.db import make_engine, make_session_factory
from models_store.models import require_model
from models_store.outcomes import add_outcomes
from models_store.refits import refit_lock
from service.config import Settings
from service.security import issue_key
from tests.cli._refit_data import SPEC, scored_records, training_columns
from tests.demo._live import free_port, live_server

MODEL = "mains"
CODE = "import sys; from service.cli import main; sys.exit(main(sys.argv[1:]))"


def riskfit(*args: str, key: str | None) -> subprocess.CompletedProcess[str]:
    env = {k: v for k, v in os.environ.items() if k != "RISKFIT_API_KEY"}
    if key is not None:
        env["RISKFIT_API_KEY"] = key
    return subprocess.run(
        [sys.executable, "-c", CODE, *args],
        capture_output=True,
        text=True,
        timeout=120,
        env=env,
        check=False,
    )


@pytest.fixture
def served(tmp_path: Path) -> Iterator[dict[str, Any]]:
    """A live server with version 1 of MODEL, 1000 scored records with shifted outcomes."""
    db = tmp_path / "riskfit.db"
    settings = Settings(database_url=f"sqlite:///{db}")  # API keys required, as deployed
    with live_server(settings) as url:
        engine = make_engine(settings.database_url)
        factory = make_session_factory(engine)
        with factory() as session:
            key = issue_key(session=session, settings=settings, role="modeler", name="cron").key
            session.commit()
        headers = {"Authorization": f"Bearer {key}"}
        with httpx.Client(base_url=url, headers=headers, timeout=60) as c:
            body = {**SPEC, "data": {"columns": training_columns(20_000, 12)}}
            assert c.post(f"/risk-models/{MODEL}/versions", json=body).status_code == 201
            records, y = scored_records(1000, "shift", 12)
            scores = c.post(f"/risk-models/{MODEL}/scores", json={"records": records}).json()
        items = [
            {"score_id": s["score_id"], "outcome": o}
            for s, o in zip(scores["scores"], y, strict=True)
        ]
        with factory() as session:
            add_outcomes(
                session=session, model=require_model(session=session, name=MODEL), items=items
            )
            session.commit()
            model_id = require_model(session=session, name=MODEL).id
        try:
            yield {"url": url, "key": key, "engine": engine, "model_id": model_id}
        finally:
            engine.dispose()


def test_cron_refit_prints_a_summary_then_json_then_replays(served: dict[str, Any]) -> None:
    url, key = served["url"], served["key"]
    dry = riskfit("refit", MODEL, "--url", url, "--dry-run", key=key)
    assert dry.returncode == 0, dry.stderr
    assert "a new version would be promoted (champion was 1)" in dry.stdout
    assert f"riskfit refit {MODEL}: intercept" in dry.stdout and "[dry run]" in dry.stdout
    done = riskfit("refit", MODEL, "--url", url, key=key)
    assert done.returncode == 0, done.stderr
    assert "version 2 promoted (champion was 1)" in done.stdout
    assert "LR test unchanged vs refit" in done.stdout and "gate log_loss" in done.stdout
    again = riskfit("refit", MODEL, "--url", url, "--json", key=key)
    assert again.returncode == 0, again.stderr
    answer = json.loads(again.stdout)
    assert answer["replayed"] is True and answer["challenger_version"] == 2


def test_cron_refit_failures_have_their_own_exit_codes(served: dict[str, Any]) -> None:
    url, key = served["url"], served["key"]
    with refit_lock(engine=served["engine"], model_id=served["model_id"]):
        busy = riskfit("refit", MODEL, "--url", url, key=key)
    assert busy.returncode == 3 and "409 refit_in_progress" in busy.stderr
    few = riskfit("refit", MODEL, "--url", url, "--last-n", "100", key=key)
    assert few.returncode == 3 and "not_enough_outcomes" in few.stderr
    assert riskfit("refit", MODEL, "--url", url, key=None).returncode == 3  # no key: 401
    gone = riskfit("refit", MODEL, "--url", f"http://127.0.0.1:{free_port()}", key=key)
    assert gone.returncode == 4 and "cannot reach" in gone.stderr
    assert riskfit("refit", MODEL, "--promote", "sometimes", key=key).returncode == 2
    assert riskfit("refit", MODEL, "--since", "yesterday", key=key).returncode == 2
