"""`riskfit serve` behind a TLS proxy: the trusted-proxy setting decides whose
X-Forwarded-Proto is believed, and with it the `Secure` flag of the dashboard cookie;
`--cookie-secure always` forces it. Checked against a live uvicorn built with the options
`riskfit serve` passes it."""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import httpx
import pytest

from service.cli.keys import create_key_in_store
from service.cli.serve import register, settings_from_args, uvicorn_options, worker_environment
from service.config import Settings
from tests.security._live import live_server
from tests.store.dbfixtures import sqlite_url


def _args(*argv: str) -> argparse.Namespace:
    parser = argparse.ArgumentParser()
    register(parser.add_subparsers())
    return parser.parse_args(["serve", *argv])


def test_serve_flags_reach_the_settings_uvicorn_and_the_workers() -> None:
    args = _args(
        "--trusted-proxies", "10.0.0.0/8,192.168.1.7",
        "--cookie-secure", "always",
        "--metrics-access", "open",
        "--body-timeout", "12.5",
        "--keep-alive", "7",
        "--limit-concurrency", "300",
    )  # fmt: skip
    settings = settings_from_args(args)
    assert settings.trusted_proxies == "10.0.0.0/8,192.168.1.7"
    assert settings.cookie_secure == "always" and settings.metrics_access == "open"
    opts = uvicorn_options(settings)
    assert opts["forwarded_allow_ips"] == "10.0.0.0/8,192.168.1.7" and opts["proxy_headers"]
    assert opts["timeout_keep_alive"] == 7 and opts["limit_concurrency"] == 300
    assert opts["server_header"] is False
    env = worker_environment(settings)
    assert env["RISKFIT_TRUSTED_PROXIES"] == "10.0.0.0/8,192.168.1.7"
    assert env["RISKFIT_COOKIE_SECURE"] == "always"
    assert env["RISKFIT_METRICS_ACCESS"] == "open"
    assert float(env["RISKFIT_BODY_TIMEOUT_SECONDS"]) == 12.5
    default = uvicorn_options(settings_from_args(_args()))
    assert default["forwarded_allow_ips"] == "127.0.0.1,::1" and default["timeout_keep_alive"] == 5


def _sign_in_cookie(port: int, key: str, headers: dict[str, str]) -> str:
    with httpx.Client(base_url=f"http://127.0.0.1:{port}", headers=headers) as client:
        form = client.get("/dashboard/sign-in")
        found = re.search(r'name="csrf_token" value="([^"]*)"', form.text)
        assert found is not None
        token = found.group(1)
        r = client.post(
            "/dashboard/sign-in",
            data={"api_key": key, "csrf_token": token},
            headers={"Cookie": f"riskfit_csrf={token}"},
        )
        assert r.status_code == 303, r.text
        return r.headers["set-cookie"]


@pytest.mark.parametrize(
    ("trusted", "cookie_secure", "secure"),
    [
        ("127.0.0.1", "auto", True),  # our proxy said https: believed
        ("10.0.0.0/8", "auto", False),  # someone else's header: not believed
        ("10.0.0.0/8", "always", True),  # forced
        ("127.0.0.1", "never", False),
    ],
)
def test_secure_cookie_behind_a_tls_proxy(
    tmp_path: Path, trusted: str, cookie_secure: str, secure: bool
) -> None:
    # Regression: only a proxy on 127.0.0.1 was believed and nothing could change that, so
    # behind an ingress on another address the cookie went without Secure.
    url = sqlite_url(tmp_path)
    key = create_key_in_store(url, role="scorer", name="viewer").key
    settings = Settings(database_url=url, trusted_proxies=trusted, cookie_secure=cookie_secure)
    options = {k: v for k, v in uvicorn_options(settings).items() if k not in ("host", "port")}
    with live_server(settings, **options) as port:
        cookie = _sign_in_cookie(port, key, {"X-Forwarded-Proto": "https"})
    assert cookie.startswith("riskfit_dashboard=")
    assert ("Secure" in cookie) is secure, cookie
