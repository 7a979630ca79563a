"""The in-process key cache: no store read for a recently seen key, bounded revocation delay.

Common practice (no external source): a credential cache trades a bounded revocation delay
for one store read per request; the bound here is ``service.security.KEY_CACHE_TTL``.
"""

from __future__ import annotations

from typing import Any

import pytest

from models_store.keys import revoke_key
from service import key_cache, security
from tests.api.conftest import ApiClient
from tests.security.conftest import bearer


class _Clock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock(monkeypatch: pytest.MonkeyPatch) -> _Clock:
    c = _Clock()
    monkeypatch.setattr(key_cache, "_clock", c)
    return c


@pytest.fixture
def store_reads(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    calls: list[str] = []
    real = security.find_key_by_hash

    def spy(**kwargs: Any) -> Any:
        calls.append(kwargs["key_hash"])
        return real(**kwargs)

    monkeypatch.setattr(security, "find_key_by_hash", spy)
    return calls


def _revoke_elsewhere(api: ApiClient, key_id: int) -> None:
    """Revoke as another process would (the store only, no eviction in this process)."""
    session = api.app.state.session_factory()
    try:
        assert revoke_key(session=session, key_id=key_id) is not None
        session.commit()
    finally:
        session.close()


def test_a_fresh_key_is_read_once_then_served_from_the_cache(
    secured: ApiClient, creds: dict[str, dict[str, str]], clock: _Clock, store_reads: list[str]
) -> None:
    for _ in range(3):
        assert secured.get("/risk-models", headers=creds["scorer"]).status_code == 200
    assert len(store_reads) == 1
    clock.now += security.KEY_CACHE_TTL  # stale: read again
    assert secured.get("/risk-models", headers=creds["scorer"]).status_code == 200
    assert len(store_reads) == 2


def test_a_key_revoked_elsewhere_is_refused_after_the_ttl(
    secured: ApiClient, creds: dict[str, dict[str, str]], clock: _Clock
) -> None:
    made = secured.post("/api-keys", json={"role": "modeler", "name": "m"}, headers=creds["admin"])
    key, key_id = made.json()["key"], made.json()["id"]
    assert secured.get("/risk-models", headers=bearer(key)).status_code == 200  # cached now
    _revoke_elsewhere(secured, key_id)
    clock.now += security.KEY_CACHE_TTL / 2
    assert secured.get("/risk-models", headers=bearer(key)).status_code == 200  # within the bound
    clock.now += security.KEY_CACHE_TTL / 2
    refused = secured.get("/risk-models", headers=bearer(key))
    assert refused.status_code == 401 and "revoked" in refused.json()["error"]["message"]
    again = secured.get("/risk-models", headers=bearer(key))  # the revoked entry is cached too
    assert again.status_code == 401 and again.json() == refused.json()


def test_the_role_check_holds_for_a_cached_key(
    secured: ApiClient, creds: dict[str, dict[str, str]], clock: _Clock, store_reads: list[str]
) -> None:
    from tests.api._data import fit_body

    assert secured.get("/risk-models", headers=creds["scorer"]).status_code == 200
    before = len(store_reads)
    r = secured.post("/risk-models/other/versions", json=fit_body(), headers=creds["scorer"])
    assert r.status_code == 403 and r.json()["error"]["details"]["required_role"] == "modeler"
    assert len(store_reads) == before  # answered from the cache
    assert secured.get("/risk-models/other", headers=creds["scorer"]).status_code == 404


def test_revocation_through_the_api_evicts_at_once(
    secured: ApiClient, creds: dict[str, dict[str, str]], clock: _Clock
) -> None:
    made = secured.post("/api-keys", json={"role": "scorer", "name": "s"}, headers=creds["admin"])
    key, key_id = made.json()["key"], made.json()["id"]
    assert secured.get("/risk-models", headers=bearer(key)).status_code == 200
    assert secured.delete(f"/api-keys/{key_id}", headers=creds["admin"]).status_code == 200
    assert secured.get("/risk-models", headers=bearer(key)).status_code == 401  # clock unmoved
