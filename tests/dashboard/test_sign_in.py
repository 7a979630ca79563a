"""Dashboard sign-in over HTTP: the session cookie (a store row), sign-out and key revocation
ending it, forgery protection of both forms (Origin check, csrf tokens), the cookie flags,
and that JSON API routes and non-browser clients keep the plain 401."""

from __future__ import annotations

import re
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import update

from models_store._types import utcnow
from models_store.orm import DashboardSession
from service.api.dashboard_session import COOKIE, CSRF_COOKIE, token_hash
from service.app import create_app
from service.cli.keys import create_key_in_store
from tests.api.conftest import ApiClient, database_url  # noqa: F401 (fixture: SQLite, PostgreSQL)
from tests.dashboard._fill import monitor_settings

HTML = {"Accept": "text/html,application/xhtml+xml,*/*;q=0.8"}  # what a browser sends


def _api(url: str, **overrides: Any) -> tuple[dict[str, str], ApiClient]:
    keys = {
        "scorer": create_key_in_store(url, role="scorer", name="viewer").key,
        "admin": create_key_in_store(url, role="admin", name="boss").key,
    }
    return keys, ApiClient(create_app(monitor_settings(url, auth_required=True, **overrides)))


@pytest.fixture
def keys_and_api(database_url: str) -> Iterator[tuple[dict[str, str], ApiClient]]:  # noqa: F811
    keys, api = _api(database_url)
    try:
        yield keys, api
    finally:
        api.close()


def _jar(token: str) -> dict[str, str]:
    return {"Cookie": f"{COOKIE}={token}"}


def _form_token(html: str) -> str:
    found = re.search(r'name="csrf_token" value="([^"]*)"', html)
    assert found is not None, "no csrf_token field in the form"
    return found.group(1)


def _sign_in_response(api: ApiClient, key: str, next_path: str = "/dashboard", **kw: Any) -> Any:
    api._client.cookies.clear()
    form = api.get("/dashboard/sign-in")
    csrf = _form_token(form.text)
    assert api._client.cookies.get(CSRF_COOKIE) == csrf  # the double-submit pair
    data = {"api_key": key, "next": next_path, "csrf_token": csrf}
    return api.post("/dashboard/sign-in", data=data, **kw)


def _sign_in(api: ApiClient, key: str, next_path: str = "/dashboard") -> str:
    r = _sign_in_response(api, key, next_path)
    assert r.status_code == 303, r.text
    set_cookie = r.headers["set-cookie"]
    assert "HttpOnly" in set_cookie and "SameSite=strict" in set_cookie
    assert "Path=/dashboard" in set_cookie and "Secure" not in set_cookie  # plain http here
    assert key not in set_cookie
    api._client.cookies.clear()  # each request below names its cookie explicitly
    return set_cookie.split(";")[0].split("=", 1)[1]


def _sign_out_token(api: ApiClient, token: str) -> str:
    page = api.get("/dashboard", headers={**HTML, **_jar(token)})
    assert page.status_code == 200 and 'id="sign-out"' in page.text
    return _form_token(page.text)


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
    out = api.post(
        "/dashboard/sign-out",
        data={"csrf_token": _sign_out_token(api, token)},
        headers=_jar(token),
    )
    assert out.status_code == 303 and f'{COOKIE}=""' in out.headers["set-cookie"]


def test_a_wrong_key_shows_the_form_again_without_echoing_it(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    _, api = keys_and_api
    wrong = "rfk_" + "x" * 43
    r = _sign_in_response(api, wrong)
    assert r.status_code == 401 and "not known to this service" in r.text
    assert wrong not in r.text and COOKIE not in r.headers.get("set-cookie", "")
    assert _form_token(r.text) == api._client.cookies.get(CSRF_COOKIE)  # try again at once
    missing = api.post("/dashboard/sign-in", data={"csrf_token": _form_token(r.text)})
    assert missing.status_code == 422 and missing.json()["error"]["field"] == "api_key"


def test_signed_out_session_cookie_replayed_is_refused(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    # Regression: sign-out only cleared the cookie in the browser; a copy of the stateless
    # token kept opening the dashboard until it expired (8 h by default).
    keys, api = keys_and_api
    token = _sign_in(api, keys["scorer"])
    csrf = _sign_out_token(api, token)
    out = api.post("/dashboard/sign-out", data={"csrf_token": csrf}, headers=_jar(token))
    assert out.status_code == 303
    replay = api.get("/dashboard", headers={**HTML, **_jar(token)})
    assert replay.status_code == 303 and replay.headers["location"].startswith("/dashboard/sign-in")
    assert api.get("/dashboard", headers=_jar(token)).status_code == 401  # non-browser client
    # another session of the same key is untouched by this sign-out
    other = _sign_in(api, keys["scorer"])
    assert api.get("/dashboard", headers={**HTML, **_jar(other)}).status_code == 200


def test_sign_out_needs_the_pages_token_and_the_same_origin(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    keys, api = keys_and_api
    token = _sign_in(api, keys["scorer"])
    for data in ({}, {"csrf_token": "0" * 64}):  # a forged form without the page's token
        r = api.post("/dashboard/sign-out", data=data, headers=_jar(token))
        assert r.status_code == 403 and r.json()["error"]["field"] == "csrf_token"
    csrf = _sign_out_token(api, token)
    evil = {**_jar(token), "Origin": "https://evil.example"}
    r = api.post("/dashboard/sign-out", data={"csrf_token": csrf}, headers=evil)
    assert r.status_code == 403 and r.json()["error"]["field"] == "Origin"
    assert api.get("/dashboard", headers={**HTML, **_jar(token)}).status_code == 200  # still in


def test_cross_origin_or_tokenless_sign_in_is_refused(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    # Regression: the sign-in form took any POST, so another site could sign a visitor's
    # browser in with the attacker's key (login forgery).
    keys, api = keys_and_api
    for origin in ("https://evil.example", "null", "http://riskfit.test.evil.example"):
        r = _sign_in_response(api, keys["scorer"], headers={"Origin": origin})
        assert r.status_code == 403 and r.json()["error"]["field"] == "Origin", origin
        assert COOKIE not in r.headers.get("set-cookie", "")
    r = _sign_in_response(api, keys["scorer"], headers={"Referer": "https://evil.example/x"})
    assert r.status_code == 403 and r.json()["error"]["field"] == "Referer"
    api._client.cookies.clear()  # no csrf cookie: a form posted from elsewhere
    r = api.post("/dashboard/sign-in", data={"api_key": keys["scorer"], "csrf_token": "a" * 43})
    assert r.status_code == 403 and r.json()["error"]["field"] == "csrf_token"
    assert keys["scorer"] not in r.text
    ok = _sign_in_response(api, keys["scorer"], headers={"Origin": "http://riskfit.test"})
    assert ok.status_code == 303 and COOKIE in ok.headers["set-cookie"]


def test_expired_unknown_and_revoked_key_sessions_are_refused(
    keys_and_api: tuple[dict, ApiClient],
) -> None:
    keys, api = keys_and_api
    token = _sign_in(api, keys["scorer"], next_path="/dashboard/water-mains")
    for bad in (token[:-1] + ("A" if token[-1] != "A" else "B"), "garbage", "", "x" * 500):
        r = api.get("/dashboard", headers={**HTML, **_jar(bad)})
        assert r.status_code == 303 and r.headers["location"].startswith("/dashboard/sign-in")
    # the store keeps only the SHA-256 of the token (hashlib, stdlib)
    with api.app.state.session_factory() as s:
        rows = s.query(DashboardSession).all()
        assert [r.token_hash for r in rows] == [token_hash(token)]
        assert token not in repr([(r.token_hash, r.key_id) for r in rows])
        s.execute(update(DashboardSession).values(expires_at=utcnow() - timedelta(seconds=1)))
        s.commit()
    r = api.get("/dashboard", headers={**HTML, **_jar(token)})
    assert r.status_code == 303  # expired
    # revoking a key ends every session signed in with it, in the same request
    first, second = _sign_in(api, keys["scorer"]), _sign_in(api, keys["scorer"])
    with api.app.state.session_factory() as s:
        key_id = s.query(DashboardSession).filter_by(token_hash=token_hash(first)).one().key_id
    admin = {"Authorization": f"Bearer {keys['admin']}"}
    assert api.delete(f"/api-keys/{key_id}", headers=admin).status_code == 200
    for revoked in (first, second):
        r = api.get("/dashboard", headers={**HTML, **_jar(revoked)})
        assert r.status_code == 303
    with api.app.state.session_factory() as s:
        ended = s.query(DashboardSession).filter_by(key_id=key_id).all()
        assert ended and all(r.revoked_at is not None for r in ended)


@pytest.mark.parametrize(
    ("mode", "base", "secure"),
    [
        ("auto", "http://riskfit.test", False),
        ("auto", "https://riskfit.test", True),
        ("always", "http://riskfit.test", True),
        ("never", "https://riskfit.test", False),
    ],
)
def test_cookie_secure_setting(tmp_path: Path, mode: str, base: str, secure: bool) -> None:
    keys, api = _api(f"sqlite:///{tmp_path / 's.db'}", cookie_secure=mode)
    try:
        form = api.get(f"{base}/dashboard/sign-in")
        assert ("Secure" in form.headers["set-cookie"]) is secure  # the csrf cookie
        data = {"api_key": keys["scorer"], "csrf_token": _form_token(form.text)}
        headers = {"Cookie": f"{CSRF_COOKIE}={_form_token(form.text)}"}
        r = api.post(f"{base}/dashboard/sign-in", data=data, headers=headers)
        assert r.status_code == 303, r.text
        assert ("Secure" in r.headers["set-cookie"]) is secure
    finally:
        api.close()
