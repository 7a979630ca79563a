"""Keys: shown once, stored only as a hash, compared with hmac.compare_digest, never logged;
revocation; the audit log of fits, champion changes and key changes; ``riskfit keys``."""

from __future__ import annotations

import hashlib
import hmac
import logging
from typing import Any

import pytest
from pydantic import SecretStr

from service.cli import main
from service.config import Settings
from service.security import hash_key
from tests.api.conftest import ApiClient, store_dump
from tests.security.conftest import MODEL, bearer


def _dump_text(api: ApiClient) -> str:
    return repr(store_dump(api))


def test_key_is_shown_once_and_stored_only_as_its_sha256(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    r = secured.post(
        "/api-keys", json={"role": "scorer", "name": "billing"}, headers=creds["admin"]
    )
    assert r.status_code == 201, r.text
    created = r.json()
    key = created["key"]
    assert key.startswith("rfk_") and len(key) >= 40 and created["prefix"] == key[:10]
    listing = secured.get("/api-keys", headers=creds["admin"]).json()
    assert key not in repr(listing) and all("key" not in k for k in listing["items"])
    assert key not in _dump_text(secured)  # nowhere in any table
    # external: hashlib.sha256 of the key is what the store holds (no pepper set)
    digest = hashlib.sha256(key.encode()).hexdigest()
    assert digest in _dump_text(secured)
    assert secured.get("/risk-models", headers=bearer(key)).status_code == 200


def test_pepper_makes_the_stored_hash_an_hmac() -> None:
    settings = Settings(database_url="sqlite://", api_key_pepper=SecretStr("s3cret"))
    expected = hmac.new(b"s3cret", b"rk_abc", hashlib.sha256).hexdigest()  # stdlib hmac
    assert hash_key("rk_abc", settings) == expected
    assert hash_key("rk_abc", Settings(database_url="sqlite://")) != expected


def test_keys_are_compared_in_constant_time(
    secured: ApiClient, creds: dict[str, dict[str, str]], monkeypatch: pytest.MonkeyPatch
) -> None:
    calls: list[tuple[Any, Any]] = []
    real = hmac.compare_digest

    def spy(a: Any, b: Any) -> bool:
        calls.append((a, b))
        return real(a, b)

    monkeypatch.setattr("service.security.hmac.compare_digest", spy)
    assert secured.get("/risk-models", headers=creds["scorer"]).status_code == 200
    assert calls and all(len(a) == len(b) == 64 for a, b in calls)


def test_revoked_key_is_refused_after_revocation(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    made = secured.post("/api-keys", json={"role": "modeler", "name": "m"}, headers=creds["admin"])
    key, key_id = made.json()["key"], made.json()["id"]
    assert secured.get("/risk-models", headers=bearer(key)).status_code == 200
    r = secured.delete(f"/api-keys/{key_id}", headers=creds["admin"])
    assert r.status_code == 200 and r.json()["revoked_at"]
    refused = secured.get("/risk-models", headers=bearer(key))
    assert refused.status_code == 401 and "revoked" in refused.json()["error"]["message"]
    assert secured.delete("/api-keys/424242", headers=creds["admin"]).status_code == 404


def test_keys_never_appear_in_logs(
    secured: ApiClient, plain_keys: dict[str, str], caplog: pytest.LogCaptureFixture
) -> None:
    caplog.set_level(logging.DEBUG)
    admin = bearer(plain_keys["admin"])
    made = secured.post("/api-keys", json={"role": "scorer", "name": "x"}, headers=admin).json()
    for key in (plain_keys["admin"], plain_keys["revoked"], made["key"], "rk_" + "y" * 43):
        secured.get("/risk-models", headers=bearer(key))
        secured.post("/risk-models/m/scores", headers=bearer(key), json={"records": "oops"})
    secured.get("/risk-models", headers={"Authorization": f"Basic {plain_keys['scorer']}"})
    text = caplog.text + repr([r.__dict__ for r in caplog.records])
    for key in (*plain_keys.values(), made["key"], "y" * 43):
        assert key not in text


def test_audit_log_records_who_did_what(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    admin_id = secured.get("/api-keys", headers=creds["admin"]).json()["items"][2]["id"]
    from tests.api._data import fit_body

    modeler = creds["modeler"]
    assert (
        secured.post(f"/risk-models/{MODEL}/versions", json=fit_body(), headers=modeler).status_code
        == 201
    )
    put = secured.put(
        f"/risk-models/{MODEL}/champion", json={"version": 2, "reason": "better"}, headers=modeler
    )
    assert put.status_code == 200, put.text
    made = secured.post("/api-keys", json={"role": "scorer", "name": "s2"}, headers=creds["admin"])
    secured.delete(f"/api-keys/{made.json()['id']}", headers=creds["admin"])
    assert secured.get("/audit-events", headers=modeler).status_code == 403
    events = secured.get("/audit-events", headers=creds["admin"]).json()["items"]
    modeler_id = next(
        k["id"]
        for k in secured.get("/api-keys", headers=creds["admin"]).json()["items"]
        if k["name"] == "modeler"
    )
    by_action = {
        (e["action"], e["details"].get("number") or e["details"].get("version")): e
        for e in reversed(events)
    }
    assert by_action[("version.create", 1)]["key_id"] == admin_id  # the fixture's fit
    assert by_action[("champion.change", 1)]["key_id"] == admin_id
    assert by_action[("version.create", 2)]["key_id"] == modeler_id
    change = by_action[("champion.change", 2)]
    assert change["key_id"] == modeler_id and change["details"]["previous_version"] == 1
    assert change["details"]["reason"] == "better" and change["model"] == MODEL
    actions = [e["action"] for e in events]
    assert actions[:2] == ["key.revoke", "key.create"]  # newest first
    assert events[0]["key_id"] == admin_id and events[0]["details"]["key_id"] == made.json()["id"]
    filtered = secured.get("/audit-events?action=champion.change", headers=creds["admin"]).json()
    assert {e["action"] for e in filtered["items"]} == {"champion.change"}


def test_a_refused_fit_leaves_no_audit_event(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    before = secured.get("/audit-events", headers=creds["admin"]).json()["count"]
    body = {"features": [{"name": "age_years", "kind": "numeric"}], "data": {"columns": {}}}
    r = secured.post(f"/risk-models/{MODEL}/versions", json=body, headers=creds["modeler"])
    assert r.status_code == 422
    assert secured.get("/audit-events", headers=creds["admin"]).json()["count"] == before


def test_cli_keys_create_list_revoke(
    secured: ApiClient, secured_settings: Settings, capsys: pytest.CaptureFixture[str]
) -> None:
    url = secured_settings.database_url
    assert main(["keys", "create", "--role", "admin", "--name", "ops", "--database-url", url]) == 0
    key = capsys.readouterr().out.strip().splitlines()[-1]  # the key is the last line
    assert key.startswith("rfk_")
    assert secured.get("/api-keys", headers=bearer(key)).status_code == 200
    assert main(["keys", "list", "--database-url", url]) == 0
    listing = capsys.readouterr().out
    assert "ops" in listing and key[:10] in listing and key not in listing
    key_id = next(
        k["id"]
        for k in secured.get("/api-keys", headers=bearer(key)).json()["items"]
        if k["name"] == "ops"
    )
    assert main(["keys", "revoke", str(key_id), "--database-url", url]) == 0
    assert secured.get("/api-keys", headers=bearer(key)).status_code == 401
    assert main(["keys", "revoke", "99999", "--database-url", url]) == 1


def test_cli_keys_create_on_an_empty_database_makes_the_first_admin(
    tmp_path: Any, capsys: pytest.CaptureFixture[str]
) -> None:
    url = f"sqlite:///{tmp_path / 'fresh.db'}"
    assert main(["keys", "create", "--role", "admin", "--database-url", url]) == 0
    assert capsys.readouterr().out.strip().splitlines()[-1].startswith("rfk_")


def test_serve_no_auth_refuses_other_hosts(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["serve", "--no-auth", "--host", "0.0.0.0", "--database-url", "sqlite://"]) == 2
    assert "--no-auth refuses to bind to 0.0.0.0" in capsys.readouterr().err
    from service.cli.serve import no_auth_allowed

    assert no_auth_allowed("127.0.0.1") and "WARNING" in capsys.readouterr().err
