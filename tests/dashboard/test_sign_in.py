"""Dashboard sign-in over HTTP: the session cookie, its signature and expiry, revocation,
and that JSON API routes and non-browser clients keep the plain 401."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from service.api.dashboard_session import COOKIE, sign_token, verify_token
from service.app import create_app
from service.cli.keys import create_key_in_store
from tests.api.conftest import ApiClient
from tests.dashboard._fill import monitor_settings

HTML = {"Accept": "text/html,application/xhtml+xml,*/*;q=0.8"}  # what a browser sends


@pytest.fixture
def keys_and_api(tmp_path: Path) -> Iterator[tuple[dict[str, str], ApiClient]]:
    url = f"sqlite:///{tmp_path / 's.db'}"
    keys = {
        "scorer": create_key_in_store(url, role="scorer", name="viewer").key,
        "admin": create_key_in_store(url, role="admin", name="boss").key,
    }
    api = ApiClient(create_app(monitor_settings(url, auth_required=True)))
    try:
        yield keys, api
    finally:
        api.close()


def _jar(token: str) -> dict[str, str]:
    return {"Cookie": f"{COOKIE}={token}"}


def _sign_in(api: ApiClient, key: str, next_path: str = "/dashboard") -> str:
    r = api.post("/dashboard/sign-in", data={"api_key": key, "next": next_path})
    assert r.status_code == 303, r.text
    set_cookie = r.headers["set-cookie"]
    assert "HttpOnly" in set_cookie and "SameSite=strict" in set_cookie
    assert "Path=/dashboard" in set_cookie and "Secure" not in set_cookie  # plain http here
    assert key not in set_cookie
    api._client.cookies.clear()  # each request below names its cookie explicitly
    return set_cookie.split(";")[0].split("=", 1)[1]


def test_cookie_or_header_opens_the_dashboard(keys_and_api: tuple[dict, ApiClient]) -> None:
    keys, api = keys_and_api
    r = api.get("/dashboard", headers=HTML)
    assert r.status_code == 303 and r.headers["location"] == "/dashboard/sign-in?next=/dashboard"
    r = api.get("/dashboard")  # not a browser: the API's 401, naming the header
    assert r.status_code == 401 and r.json()["error"]["field"] == "Authorization"
    form = api.get("/dashboard/sign-in", params={"next": "https://elsewhere.example/"})
    assert 'name="api_key"' in form.text and 'value="/dashboard"' in form.text  # no open redirect
    token = _sign_in(api, keys["scorer"])
    page = api.get("/dashboard", headers={**HTML, **_jar(token)})
    assert page.status_code == 200 and 'id="signed-in-as">viewer<' in page.text
    header = {"Authorization": f"Bearer {keys['scorer']}"}
    assert api.get("/dashboard", headers=header).status_code == 200
    # the cookie is for the dashboard only: the JSON API still wants the key
    assert api.get("/risk-models", headers=_jar(token)).status_code == 401
    unknown = api.get("/dashboard/no-such-model", headers=_jar(token))
    assert unknown.status_code == 404 and unknown.json()["error"]["field"] == "model"
    out = api.post("/dashboard/sign-out", headers=_jar(token))
    assert out.status_code == 303 and f'{COOKIE}=""' in out.headers["set-cookie"]


def test_a_wrong_key_shows_the_form_again_without_echoing_it(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    _, api = keys_and_api
    wrong = "rk_" + "x" * 43
    r = api.post("/dashboard/sign-in", data={"api_key": wrong})
    assert r.status_code == 401 and "not known to this service" in r.text
    assert wrong not in r.text and "set-cookie" not in r.headers
    missing = api.post("/dashboard/sign-in", data={})
    assert missing.status_code == 422 and missing.json()["error"]["field"] == "api_key"


def test_forged_expired_and_revoked_sessions_are_refused(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    keys, api = keys_and_api
    token = _sign_in(api, keys["scorer"], next_path="/dashboard/water-mains")
    key_id, expires, signature = token.split(".")
    forged = f"{int(key_id) + 1}.{expires}.{signature}"  # the admin key's id, same signature
    for bad in (forged, f"{key_id}.{int(expires) + 60}.{signature}", "garbage", ""):
        r = api.get("/dashboard", headers={**HTML, **_jar(bad)})
        assert r.status_code == 303 and r.headers["location"].startswith("/dashboard/sign-in")
    secret = b"s" * 32
    assert verify_token(secret, sign_token(secret, 7, 2_000), now=1_999.0) == 7
    assert verify_token(secret, sign_token(secret, 7, 2_000), now=2_000.0) is None  # expired
    assert verify_token(b"t" * 32, sign_token(secret, 7, 2_000), now=0.0) is None
    admin = {"Authorization": f"Bearer {keys['admin']}"}
    assert api.delete(f"/api-keys/{key_id}", headers=admin).status_code == 200
    r = api.get("/dashboard", headers={**HTML, **_jar(token)})
    assert r.status_code == 303  # revoking the key ends its sessions at once
