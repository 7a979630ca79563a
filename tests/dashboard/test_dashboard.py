"""The dashboard: content through httpx, then in real headless Chromium (Debian's chromium
driven by Playwright's Python API) against a live uvicorn on 127.0.0.1."""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from service.app import create_app
from service.cli.keys import create_key_in_store
from service.dashboard import CAUTIONS
from tests.api.conftest import ApiClient
from tests.dashboard._fill import (
    MODEL,
    draw_outcomes,
    fit,
    monitor_settings,
    post_outcomes,
    score,
)
from tests.demo._live import live_server

CHROMIUM = "/usr/bin/chromium"
ARGS = [
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


@pytest.fixture(scope="module")
def filled(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """A SQLite store with two versions, v2 champion, scores and outcomes (shifted inputs)."""
    url = f"sqlite:///{tmp_path_factory.mktemp('dash') / 'd.db'}"
    api = ApiClient(create_app(monitor_settings(url)))
    try:
        fit(api)
        s = score(api, 1500, seed=141)
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=142))
        fit(api, seed=9)
        api.put(
            f"/risk-models/{MODEL}/champion", json={"version": 2, "reason": "refit on year two"}
        )
        s2 = score(api, 2500, seed=143, age_shift=30.0)
        post_outcomes(api, s2.ids, draw_outcomes(s2.p, seed=144, logit_shift=0.5))
        report = api.get(f"/risk-models/{MODEL}/calibration", params={"version": 2}).json()
    finally:
        api.close()
    return {"url": url, "report": report}


def test_model_page_shows_what_the_api_says(filled: dict[str, Any], tmp_path: Path) -> None:
    api = ApiClient(create_app(monitor_settings(filled["url"])))
    try:
        html = api.get(f"/dashboard/{MODEL}").text
        index = api.get("/dashboard").text
        css = api.get("/dashboard/static/riskfit.css")
    finally:
        api.close()
    slope = filled["report"]["measures"]["calibration_slope"]["estimate"]
    assert MODEL in html and "champion v2" in html and f"{slope:.4g}" in html
    assert all(line in html for line in CAUTIONS)
    assert "Predicted risk (%)" in html and "refit on year two" in html
    assert f'href="/dashboard/{MODEL}"' in index and css.headers["content-type"].startswith(
        "text/css"
    )


@pytest.fixture(scope="module")
def live_url(filled: dict[str, Any]) -> Iterator[str]:
    """The app with API keys required (the default) on the filled store, under uvicorn."""
    filled["scorer_key"] = create_key_in_store(filled["url"], role="scorer", name="viewer").key
    with live_server(monitor_settings(filled["url"], auth_required=True)) as url:
        yield url


@pytest.mark.browser
@pytest.mark.skipif(
    not shutil.which(CHROMIUM), reason="Debian's chromium is not installed at /usr/bin/chromium"
)
def test_dashboard_in_headless_chromium(
    filled: dict[str, Any], live_url: str, tmp_path: Path
) -> None:
    from playwright.sync_api import sync_playwright

    slope = filled["report"]["measures"]["calibration_slope"]["estimate"]
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        try:
            context = browser.new_context(viewport={"width": 1280, "height": 900})
            page = context.new_page()
            console: list[str] = []
            page.on("console", lambda message: console.append(message.text))
            page.goto(f"{live_url}/dashboard", wait_until="load")
            assert page.url.startswith(f"{live_url}/dashboard/sign-in")  # no session yet
            page.fill("#api_key", "rk_not-a-key-of-this-service")
            page.click("#sign-in-button")
            assert "not known to this service" in page.inner_text("#sign-in-error")
            page.fill("#api_key", filled["scorer_key"])
            page.click("#sign-in-button")
            page.wait_for_selector("#models")
            assert page.url == f"{live_url}/dashboard"
            assert page.inner_text("#signed-in-as") == "viewer"
            (cookie,) = [c for c in context.cookies() if c["name"] == "riskfit_dashboard"]
            assert cookie["httpOnly"] and cookie["sameSite"] == "Strict"
            assert all(c["httpOnly"] and c["sameSite"] == "Strict" for c in context.cookies())
            assert filled["scorer_key"] not in cookie["value"]  # a session token, not the key
            assert page.evaluate("document.cookie") == ""  # HttpOnly: scripts cannot read it
            page.click(f"text={MODEL}")
            page.wait_for_selector("#model-name")
            assert page.inner_text("#model-name") == MODEL
            assert page.inner_text("#champion") == "champion v2"
            shown = page.inner_text('#measures tr[data-measure="estimate"] >> nth=1')
            assert "Calibration slope" in shown and f"{slope:.4g}" in shown
            cautions = page.inner_text("#cautions")
            assert all(line in cautions for line in CAUTIONS)
            labels = [
                t.strip() for t in page.locator("#reliability-plot svg text").all_text_contents()
            ]
            assert "Predicted risk (%)" in labels and "Observed event rate (%)" in labels
            assert page.locator("#measures-plot svg").count() == 1
            assert "Population stability index (unitless)" in (page.text_content("#psi-plot") or "")
            assert page.locator("#alerts table tbody tr").count() >= 1  # the shift is flagged
            css_ok = page.evaluate(
                "getComputedStyle(document.querySelector('header.top')).backgroundColor"
            )
            assert css_ok == "rgb(35, 48, 61)"  # the stylesheet loaded
            page.screenshot(path=str(Path("/tmp") / "riskfit-dashboard.png"), full_page=True)
            # the Content-Security-Policy blocks nothing of the dashboard's own (Chromium
            # reports every refused style, image or form as a console message)
            assert not [m for m in console if "Content Security Policy" in m], console
            page.click("#sign-out button")
            page.wait_for_selector("#sign-in")
            assert [c["name"] for c in context.cookies()] == ["riskfit_csrf"]  # session gone
            page.goto(f"{live_url}/dashboard/{MODEL}", wait_until="load")
            assert page.url.startswith(f"{live_url}/dashboard/sign-in?next=/dashboard/{MODEL}")
        finally:
            browser.close()
