"""A key-checking app per test (auth on, the default) with one key per role and a revoked one.

``creds[name]`` are the request headers of each credential in :data:`CREDENTIALS`; the app
already holds model ``water-mains`` with version 1, fitted with the admin key.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from service.app import create_app
from service.config import Settings
from service.security import issue_key, revoke
from tests.api._data import fit_body
from tests.api.conftest import ApiClient, store_dump
from tests.store.dbfixtures import sqlite_url

MODEL = "water-mains"
ROLES = ("scorer", "modeler", "admin")
CREDENTIALS = ("none", "bad", "revoked", *ROLES)


def bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


@pytest.fixture
def secured_settings(tmp_path: Path) -> Settings:
    return Settings(database_url=sqlite_url(tmp_path))


@pytest.fixture
def secured(secured_settings: Settings) -> Iterator[ApiClient]:
    assert secured_settings.auth_required  # the default
    client = ApiClient(create_app(secured_settings))
    try:
        yield client
    finally:
        client.close()


@pytest.fixture
def plain_keys(secured: ApiClient) -> dict[str, str]:
    """The secret of each role's key, and of a revoked admin key (created in the store)."""
    session = secured.app.state.session_factory()
    settings = secured.app.state.settings
    try:
        out = {r: issue_key(session=session, settings=settings, role=r, name=r).key for r in ROLES}
        gone = issue_key(session=session, settings=settings, role="admin", name="gone")
        revoke(session=session, key_id=gone.id)
        session.commit()
    finally:
        session.close()
    out["revoked"] = gone.key
    return out


@pytest.fixture
def creds(secured: ApiClient, plain_keys: dict[str, str]) -> dict[str, dict[str, str]]:
    out = {name: bearer(key) for name, key in plain_keys.items()}
    out["none"] = {}
    out["bad"] = bearer("rk_" + "x" * 43)
    r = secured.post(f"/risk-models/{MODEL}/versions", json=fit_body(), headers=out["admin"])
    assert r.status_code == 201, r.text
    return out


def content_dump(api: ApiClient) -> dict[str, Any]:
    """:func:`store_dump` without ``api_key.last_used_at`` (access bookkeeping, refreshed at
    most once a minute by any authenticated request, refused or not)."""
    dump = store_dump(api)
    with api.app.state.engine.connect() as conn:
        from sqlalchemy import text

        keys = conn.execute(
            text("SELECT id, name, role, key_hash, prefix, revoked_at FROM api_key")
        )
        dump["api_key"] = sorted(map(repr, keys))
    return dump


@pytest.fixture
def limited_api(tmp_path: Path) -> Iterator[ApiClient]:
    """Auth on, with small limits (so the catalogue's oversized requests stay small), and
    model ``water-mains`` version 1."""
    settings = Settings(
        database_url=sqlite_url(tmp_path),
        max_body_bytes=2**20,
        max_records_per_request=500,
        max_json_fit_rows=1600,
        max_levels=50,
        max_string_length=1000,
    )
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()


@pytest.fixture
def limited_admin(limited_api: ApiClient) -> dict[str, str]:
    session = limited_api.app.state.session_factory()
    try:
        key = issue_key(
            session=session, settings=limited_api.app.state.settings, role="admin", name="a"
        ).key
        session.commit()
    finally:
        session.close()
    r = limited_api.post(f"/risk-models/{MODEL}/versions", json=fit_body(), headers=bearer(key))
    assert r.status_code == 201, r.text
    return bearer(key)
