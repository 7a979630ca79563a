"""The refit lock: one holder per model across engines (processes), stale leases taken over."""

from __future__ import annotations

from datetime import timedelta

import pytest
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session

from models_store import (
    RiskModel,
    acquire_refit_lock,
    create_model,
    find_refit_run,
    finish_refit_run,
    get_refit_run,
    list_refit_runs,
    make_engine,
    refit_lock,
    refresh_refit_lock,
    release_refit_lock,
    start_refit_run,
    utcnow,
)
from service.errors import RefitInProgressError


def test_lock_is_exclusive_across_two_engines(
    db_url: str, engine: Engine, model: RiskModel
) -> None:
    second = make_engine(db_url)  # a separate pool, as another process would have
    try:
        token = acquire_refit_lock(engine=engine, model_id=model.id)
        with pytest.raises(RefitInProgressError) as info:
            acquire_refit_lock(engine=second, model_id=model.id)
        assert "lease_expires" in info.value.details
        assert not release_refit_lock(engine=second, model_id=model.id, token="not-the-token")
        assert release_refit_lock(engine=second, model_id=model.id, token=token)
        with refit_lock(engine=second, model_id=model.id), pytest.raises(RefitInProgressError):
            acquire_refit_lock(engine=engine, model_id=model.id)
        acquire_refit_lock(engine=engine, model_id=model.id)  # released by the block
    finally:
        second.dispose()


def test_locks_are_per_model(engine: Engine, session: Session, model: RiskModel) -> None:
    other = create_model(session=session, name="other")
    session.commit()
    acquire_refit_lock(engine=engine, model_id=model.id)
    acquire_refit_lock(engine=engine, model_id=other.id)


def test_stale_lock_is_taken_over_and_its_run_marked_failed(
    engine: Engine, session: Session, model: RiskModel
) -> None:
    dead = acquire_refit_lock(engine=engine, model_id=model.id, ttl_seconds=60)
    run = start_refit_run(session=session, model=model, request_fingerprint="f" * 64)
    session.commit()
    run_id = run.id
    # the holder was killed; a minute later the lease has expired
    later = utcnow() + timedelta(seconds=61)
    token = acquire_refit_lock(engine=engine, model_id=model.id, now=later)
    assert token != dead
    assert not refresh_refit_lock(engine=engine, model_id=model.id, token=dead)
    assert refresh_refit_lock(engine=engine, model_id=model.id, token=token)
    session.expire_all()
    abandoned = get_refit_run(session=session, model=model, run_id=run_id)
    assert abandoned is not None and abandoned.status == "failed"
    error = abandoned.result["error"]  # a dict like every refit error (the API's schema)
    assert error["code"] == "refit_interrupted" and "stopped renewing" in error["message"]


def test_refit_run_lifecycle(session: Session, model: RiskModel) -> None:
    run = start_refit_run(session=session, model=model, request_fingerprint="a" * 64)
    assert run.status == "running" and run.finished_at is None
    finish_refit_run(session=session, run=run, status="succeeded", result={"decision": "keep"})
    session.commit()
    again = find_refit_run(session=session, model=model, request_fingerprint="a" * 64)
    assert again is run and again.finished_at is not None and again.result["decision"] == "keep"
    assert list_refit_runs(session=session, model=model) == [run]
    with pytest.raises(ValueError, match="status"):
        finish_refit_run(session=session, run=run, status="running", result={})
