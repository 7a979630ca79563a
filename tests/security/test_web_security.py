"""Web hygiene: security headers on the dashboard and key answers (none added to scoring),
``/metrics`` behind a key by default, the API key prefix (new ``rfk_``, old ``rk_`` still
accepted), and a stalled request body answered 408 by a live server."""

from __future__ import annotations

import contextlib
import hashlib
import secrets
import socket
import time
from pathlib import Path

import pytest

from models_store.keys import create_key
from service.app import create_app
from service.config import Settings
from service.security import LEGACY_KEY_PREFIXES, hash_key
from service.web_security import DASHBOARD_CSP
from tests.api._data import NEW_RECORDS
from tests.api.conftest import ApiClient
from tests.security._live import live_server
from tests.security.conftest import MODEL, bearer
from tests.store.dbfixtures import sqlite_url

# --- headers ----------------------------------------------------------------------------------


def test_dashboard_pages_carry_csp_no_framing_nosniff_and_no_store(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    # Regression: no CSP, frame-ancestors, nosniff or Cache-Control on authenticated pages.
    for url in ("/dashboard", f"/dashboard/{MODEL}", "/dashboard/sign-in"):
        r = secured.get(url, headers=creds["scorer"])
        assert r.status_code == 200, url
        csp = r.headers["content-security-policy"]
        assert "frame-ancestors 'none'" in csp and "script-src 'none'" in csp, url
        assert "default-src 'none'" in csp and "form-action 'self'" in csp, url
        assert r.headers["x-frame-options"] == "DENY", url
        assert r.headers["x-content-type-options"] == "nosniff", url
        assert r.headers["referrer-policy"] == "same-origin", url
        assert r.headers["cache-control"] == "no-store", url
    # the templates have no script of their own, so "script-src 'none'" breaks nothing
    page = secured.get(f"/dashboard/{MODEL}", headers=creds["scorer"]).text
    assert "<script" not in page.lower() and " on" + "click=" not in page.lower()
    refused = secured.get("/dashboard")  # an error answer of the dashboard: headers too
    assert refused.status_code == 401 and refused.headers["cache-control"] == "no-store"
    css = secured.get("/dashboard/static/riskfit.css")
    assert css.headers["x-content-type-options"] == "nosniff"
    assert "cache-control" not in css.headers  # the stylesheet may be cached


def test_key_answers_are_not_stored_and_scoring_gets_no_extra_headers(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    made = secured.post("/api-keys", json={"role": "scorer", "name": "n"}, headers=creds["admin"])
    assert made.status_code == 201 and made.headers["cache-control"] == "no-store"
    assert made.headers["x-content-type-options"] == "nosniff"
    listed = secured.get("/api-keys", headers=creds["admin"])
    assert listed.headers["cache-control"] == "no-store"
    body = {"records": NEW_RECORDS[:1]}
    scored = secured.post(f"/risk-models/{MODEL}/scores", json=body, headers=creds["scorer"])
    assert scored.status_code == 200, scored.text
    assert "content-security-policy" not in scored.headers  # the hot path is left alone
    assert DASHBOARD_CSP.count("'unsafe-inline'") == 1  # styles only (inline SVG attributes)


# --- /metrics ---------------------------------------------------------------------------------


def test_metrics_need_a_key_by_default(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    # Regression: /metrics answered anyone with model names and scoring volumes.
    r = secured.get("/metrics")
    assert r.status_code == 401 and r.json()["error"]["field"] == "Authorization"
    assert MODEL not in r.text
    assert secured.get("/metrics", headers=creds["bad"]).status_code == 401
    ok = secured.get("/metrics", headers=creds["scorer"])
    assert ok.status_code == 200 and "riskfit_http_requests_total" in ok.text


def test_metrics_open_when_the_setting_says_so(tmp_path: Path) -> None:
    api = ApiClient(create_app(Settings(database_url=sqlite_url(tmp_path), metrics_access="open")))
    try:
        assert api.get("/metrics").status_code == 200
        assert api.get("/risk-models").status_code == 401  # only /metrics is opened
    finally:
        api.close()


# --- key prefix -------------------------------------------------------------------------------


def test_new_keys_have_our_own_prefix_and_old_prefix_keys_still_work(
    secured: ApiClient, creds: dict[str, dict[str, str]]
) -> None:
    # Regression: new keys began with "rk_", the prefix of a payments provider's restricted
    # keys (common practice: secret scanners match vendors' key prefixes).
    made = secured.post("/api-keys", json={"role": "scorer", "name": "x"}, headers=creds["admin"])
    key = made.json()["key"]
    assert key.startswith("rfk_") and not key.startswith("rk_")
    assert made.json()["prefix"] == key[:10]
    # a key issued before the change (stored by hash, as then) still authenticates
    old = "rk_" + secrets.token_urlsafe(32)
    assert old.startswith(LEGACY_KEY_PREFIXES)
    settings = secured.app.state.settings
    session = secured.app.state.session_factory()
    try:
        create_key(
            session=session, name="old", role="scorer", key_hash=hash_key(old, settings),
            prefix=old[:10],
        )  # fmt: skip
        session.commit()
    finally:
        session.close()
    assert hash_key(old, settings) == hashlib.sha256(old.encode()).hexdigest()  # stdlib
    assert secured.get("/risk-models", headers=bearer(old)).status_code == 200
    assert secured.get("/risk-models", headers=bearer(old[:-1] + "!")).status_code == 401


# --- stalled request body ---------------------------------------------------------------------


def _stall(port: int, head: bytes, partial: bytes, wait: float) -> tuple[bytes, float, bool]:
    """Send ``head`` + ``partial`` and stall; the answer, seconds to it, and whether closed."""
    with socket.create_connection(("127.0.0.1", port), timeout=wait) as conn:
        conn.sendall(head + partial)
        start = time.monotonic()
        data = b""
        closed = False
        with contextlib.suppress(TimeoutError):
            while True:
                chunk = conn.recv(65536)
                if not chunk:
                    closed = True
                    break
                data += chunk
        return data, time.monotonic() - start, closed


@pytest.mark.parametrize("kind", ["json", "multipart"])
def test_a_stalled_body_gets_408_and_the_connection_is_closed(tmp_path: Path, kind: str) -> None:
    # Regression: a client that sent headers and part of a body, then nothing, held the
    # connection (and a request slot) open indefinitely.
    timeout = 0.5
    settings = Settings(
        database_url=sqlite_url(tmp_path), auth_required=False, body_timeout_seconds=timeout
    )
    if kind == "json":
        path, ctype, partial = f"/risk-models/{MODEL}/scores", "application/json", b'{"rec'
    else:
        path, ctype = f"/risk-models/{MODEL}/versions", "multipart/form-data; boundary=b0"
        partial = b'--b0\r\nContent-Disposition: form-data; name="spec"\r\n\r\n{"ta'
    head = (
        f"POST {path} HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: {ctype}\r\n"
        f"Content-Length: 1000\r\n\r\n"
    ).encode()
    with live_server(settings) as port:
        data, seconds, closed = _stall(port, head, partial, wait=timeout + 5)
    assert data.startswith(b"HTTP/1.1 408 "), data[:200]
    assert b"connection: close" in data.lower() and b'"request_timeout"' in data
    assert closed, "the server kept the connection open"
    assert timeout * 0.8 <= seconds <= timeout + 3  # about the setting, not the keep-alive


def test_a_slow_but_steady_body_is_not_cut(tmp_path: Path) -> None:
    timeout = 0.5
    settings = Settings(
        database_url=sqlite_url(tmp_path), auth_required=False, body_timeout_seconds=timeout
    )
    body = b'{"records": [{"x": 1}]}'
    head = (
        f"POST /risk-models/nothing-here/scores HTTP/1.1\r\nHost: 127.0.0.1\r\n"
        f"Content-Type: application/json\r\nContent-Length: {len(body)}\r\n"
        f"Connection: close\r\n\r\n"
    ).encode()
    with live_server(settings) as port, socket.create_connection(("127.0.0.1", port), 10) as c:
        c.sendall(head)
        for i in range(0, len(body), 8):  # pieces 0.2 s apart: 1 s in all, over the timeout
            time.sleep(0.2)
            c.sendall(body[i : i + 8])
        answer = c.recv(65536)
    assert answer.startswith(b"HTTP/1.1 404 "), answer[:200]  # the route's own answer
