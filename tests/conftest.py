"""Fixtures shared by every suite."""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from typing import Any

import pytest
from sqlalchemy import event, select
from sqlalchemy.orm import Session

# The apps the tests start leave the garbage collector alone: its tuning for a server starts
# with a full collection, about 0.2 s in a process holding every test dependency, for each of
# hundreds of apps (tests/api/test_server_heap.py turns it on for itself).
os.environ.setdefault("RISKFIT_TUNE_GC", "false")


def pytest_report_header(config: pytest.Config) -> list[str]:
    pg = os.environ.get("RISKFIT_TEST_POSTGRES_URL")
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    return [
        "riskfit: PostgreSQL tests "
        + (f"ON ({pg})" if pg else "SKIPPED (set RISKFIT_TEST_POSTGRES_URL to run them)"),
        "riskfit: browser tests "
        + (f"ON ({chromium})" if chromium else "SKIPPED (install Debian's chromium to run them)"),
    ]


@pytest.fixture(scope="session")
def postgres_url() -> str:
    """URL of a real PostgreSQL server for the store and API suites, or skip saying why."""
    url = os.environ.get("RISKFIT_TEST_POSTGRES_URL")
    if not url:
        pytest.skip("PostgreSQL tests skipped: RISKFIT_TEST_POSTGRES_URL is not set")
    return url


# --- every version the suite stores must read back ------------------------------------------
# An ORM listener notes each ModelVersion a session flushes; when that session commits, each is
# read back in a fresh session on the same engine (while the test's database still exists)
# through the same builder and schema as GET /risk-models/{m}/versions/{n}
# (service.version_answer.version_answer) and serialised to JSON. A failure is kept and
# fails the test that stored the version, at its teardown. Cost: one read per stored version.

_NEW_VERSIONS = "riskfit_test_new_versions"
_READ_BACK_FAILURES: list[str] = []


@event.listens_for(Session, "after_flush")
def _note_new_versions(session: Session, _context: Any) -> None:
    from models_store.orm import ModelVersion

    new = [(o.model_id, o.number) for o in session.new if isinstance(o, ModelVersion)]
    if new:
        session.info.setdefault(_NEW_VERSIONS, []).extend(new)


@event.listens_for(Session, "after_rollback")
def _forget_new_versions(session: Session) -> None:
    if not session.in_nested_transaction():  # a savepoint's end is not the transaction's
        session.info.pop(_NEW_VERSIONS, None)


@event.listens_for(Session, "after_commit")
def _read_back_new_versions(session: Session) -> None:
    if session.in_nested_transaction():  # a savepoint released: nothing committed yet
        return
    keys = session.info.pop(_NEW_VERSIONS, None)
    if not keys:
        return
    from models_store.orm import ModelVersion, RiskModel

    bind = session.get_bind(mapper=ModelVersion)
    with Session(bind) as s:
        for model_id, number in keys:
            try:
                from service.version_answer import version_answer

                stmt = select(ModelVersion).where(
                    ModelVersion.model_id == model_id, ModelVersion.number == number
                )
                v = s.scalar(stmt)
                if v is None:  # rolled back inside the committed transaction (a savepoint)
                    continue
                model = s.get_one(RiskModel, model_id)
                version_answer(s, model, v).model_dump_json()
            except Exception as exc:
                _READ_BACK_FAILURES.append(f"version {number} of model id {model_id}: {exc!r}")


@pytest.fixture(autouse=True)
def _stored_versions_read_back() -> Iterator[None]:
    """Fail a test that committed a version its GET could not answer (see above)."""
    _READ_BACK_FAILURES.clear()
    yield
    failures = list(_READ_BACK_FAILURES)
    _READ_BACK_FAILURES.clear()
    assert not failures, "stored versions that cannot be read back: " + "; ".join(failures)
