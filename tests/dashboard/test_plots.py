"""Every plot the service draws, through the real HTTP routes, on awkward but valid data:
low prevalence (2-4% events, risk groups without events), a risk group where every record
is an event, a tiny window (12 outcomes), one risk group only (a single distinct
prediction), and a model whose feature names and levels hold math-like text (``$x^2$``,
``\\frac``, ``_{``) that must be drawn as typed.

Each plot must answer 200 with a valid SVG (parsed as XML) or PNG (decoded by Pillow), and
the model's dashboard page must answer 200 with its three inline plots.
"""

from __future__ import annotations

import io
import xml.etree.ElementTree as ET
from typing import Any

import numpy as np
import pytest
from PIL import Image

from service.app import create_app
from tests.api._data import SPEC, rows_of, segments
from tests.api.conftest import ApiClient
from tests.dashboard._fill import monitor_settings

PLOTS = (
    "calibration/reliability.svg",
    "calibration/reliability.png",
    "drift/measures.svg",
    "drift/measures.png",
    "drift/psi.svg",
    "drift/psi.png",
)
SVG_NS = "{http://www.w3.org/2000/svg}"

# Feature names and levels that mathtext would parse ("$x^2$" renders as math) or reject
# ("$\frac$", "$_{$" are mathtext syntax errors): they must be shown as typed.
MATH_NAMES = {
    "age_years": "age $x^2$",
    "diameter_mm": r"diameter $\frac$ mm",
    "material": "material $_{$",
    "soil": r"soil_{grade} \frac",
    "prior_breaks_5y": "prior $x^2$ <b>breaks</b> & co",  # markup too: escaped in the SVG
}
MATH_LEVELS = {
    "PVC": "PVC $x^2$",
    "cast iron": r"cast $\frac$ iron",
    "ductile iron": "ductile_{iron}",
    "asbestos cement": "asbestos $_{$",
}


def _spec(renamed: bool) -> dict[str, Any]:
    if not renamed:
        return SPEC
    feats = []
    for f in SPEC["features"]:
        g = {**f, "name": MATH_NAMES[f["name"]]}
        if f["name"] == "material":
            g["reference"] = MATH_LEVELS[f["reference"]]
        feats.append(g)
    return {**SPEC, "features": feats}


def _columns(n: int, seed: int, renamed: bool) -> dict[str, list[Any]]:
    cols = segments(n, seed)
    if renamed:
        cols["material"] = [MATH_LEVELS[m] for m in cols["material"]]
        cols = {MATH_NAMES.get(k, k): v for k, v in cols.items()}
    return cols


def _fit(api: ApiClient, name: str, renamed: bool = False) -> None:
    body = {**_spec(renamed), "data": {"columns": _columns(1500, 7, renamed)}}
    r = api.post(f"/risk-models/{name}/versions", json=body)
    assert r.status_code == 201, r.text


def _score(
    api: ApiClient, name: str, records: list[dict[str, Any]]
) -> tuple[list[str], np.ndarray]:
    body = {"records": [{**r, "key": f"{name}-{i}"} for i, r in enumerate(records)]}
    r = api.post(f"/risk-models/{name}/scores", json=body)
    assert r.status_code == 200, r.text
    scores = r.json()["scores"]
    return [s["score_id"] for s in scores], np.array([s["probability"] for s in scores])


def _outcomes(api: ApiClient, name: str, ids: list[str], y: np.ndarray) -> None:
    items = [{"score_id": i, "outcome": int(o)} for i, o in zip(ids, y, strict=True)]
    r = api.post(f"/risk-models/{name}/outcomes", json={"outcomes": items})
    assert r.status_code == 200, r.text


def _records(n: int, seed: int, renamed: bool = False) -> list[dict[str, Any]]:
    cols = _columns(n, seed, renamed)
    cols.pop("outcome")
    return rows_of(cols)


def _bernoulli(p: np.ndarray, seed: int, shift: float = 0.0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    eta = np.log(p) - np.log1p(-p) + shift
    return (rng.random(p.size) < 1.0 / (1.0 + np.exp(-eta))).astype(int)


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """One SQLite store, one model per awkward case (the smallest report minimums allowed)."""
    url = f"sqlite:///{tmp_path_factory.mktemp('plots') / 'p.db'}"
    settings = monitor_settings(url, monitor_min_outcomes=10, monitor_min_events=2)
    api = ApiClient(create_app(settings))
    facts: dict[str, Any] = {"url": url, "settings": settings}
    try:
        # low prevalence: outcomes drawn 1.45 logits below the predictions
        _fit(api, "low-prevalence")
        ids, p = _score(api, "low-prevalence", _records(1500, 201))
        y = _bernoulli(p, 202, shift=-1.45)
        facts["low_prevalence_rate"] = y.mean()
        _outcomes(api, "low-prevalence", ids, y)
        # every record of the highest-risk group is an event
        _fit(api, "all-event-group")
        ids, p = _score(api, "all-event-group", _records(1000, 203))
        y = _bernoulli(p, 204)
        y[p >= np.quantile(p, 0.85)] = 1
        _outcomes(api, "all-event-group", ids, y)
        # a tiny window: 12 outcomes, 2 events
        _fit(api, "tiny-n")
        ids, _p = _score(api, "tiny-n", _records(12, 205))
        _outcomes(api, "tiny-n", ids, np.r_[1, 0, 0, 0, 0, 0, 0, 1, 0, 0, 0, 0])
        # one risk group: the same record scored 150 times (one distinct prediction)
        _fit(api, "single-group")
        ids, p = _score(api, "single-group", _records(1, 206) * 150)
        assert np.unique(p).size == 1
        _outcomes(api, "single-group", ids, np.r_[np.ones(9), np.zeros(141)])
        # math-like feature names and levels
        _fit(api, "math-names", renamed=True)
        ids, p = _score(api, "math-names", _records(600, 207, renamed=True))
        _outcomes(api, "math-names", ids, _bernoulli(p, 208))
    finally:
        api.close()
    return facts


CASES = ("low-prevalence", "all-event-group", "tiny-n", "single-group", "math-names")


@pytest.fixture(scope="module")
def api(store: dict[str, Any]) -> Any:
    client = ApiClient(create_app(store["settings"]))
    yield client
    client.close()


def _svg_text(content: bytes) -> str:
    root = ET.fromstring(content)  # a well-formed SVG document
    assert root.tag == f"{SVG_NS}svg"
    return " ".join(t for el in root.iter(f"{SVG_NS}text") for t in el.itertext())


def _valid_png(content: bytes) -> tuple[int, int]:
    assert content[:8] == b"\x89PNG\r\n\x1a\n"
    with Image.open(io.BytesIO(content)) as img:
        img.load()  # decodes every pixel: a truncated or corrupt PNG raises
        return img.size


@pytest.mark.parametrize("model", CASES)
@pytest.mark.parametrize("plot", PLOTS)
def test_every_plot_answers_a_valid_image(api: ApiClient, model: str, plot: str) -> None:
    r = api.get(f"/risk-models/{model}/{plot}")
    assert r.status_code == 200, r.text[:500]
    if plot.endswith(".svg"):
        assert r.headers["content-type"].startswith("image/svg+xml")
        assert _svg_text(r.content)
    else:
        assert r.headers["content-type"] == "image/png"
        w, h = _valid_png(r.content)
        assert w > 200 and h > 100


@pytest.mark.parametrize("model", CASES)
def test_dashboard_page_answers_with_its_three_plots(api: ApiClient, model: str) -> None:
    r = api.get(f"/dashboard/{model}")
    assert r.status_code == 200, r.text[:500]
    html = r.text
    for plot_id in ("reliability-plot", "measures-plot", "psi-plot"):
        start = html.index(f'id="{plot_id}"')
        assert "<svg" in html[start : start + 400], plot_id


def test_the_cases_are_what_they_claim(api: ApiClient, store: dict[str, Any]) -> None:
    """The data really have the edge cases, and every interval holds its estimate exactly."""
    assert 0.02 <= store["low_prevalence_rate"] <= 0.04
    reports = {m: api.get(f"/risk-models/{m}/calibration").json() for m in CASES}
    assert all(rep["status"] == "ok" for rep in reports.values())
    groups = {m: rep["reliability"]["groups"] for m, rep in reports.items()}
    assert any(g["events"] == 0 for g in groups["low-prevalence"])
    assert any(g["events"] == g["sum_weights"] for g in groups["all-event-group"])
    assert reports["tiny-n"]["counts"] == {"n": 12, "events": 2, "non_events": 10}
    assert len(groups["single-group"]) == 1
    for rep in reports.values():
        for g in rep["reliability"]["groups"]:
            assert g["ci_lower"] <= g["observed_rate"] <= g["ci_upper"]
            if g["events"] == 0:
                assert g["ci_lower"] == 0.0
            if g["events"] == g["sum_weights"]:
                assert g["ci_upper"] == 1.0
        oe = rep["measures"]["observed_expected"]
        assert oe["ci_lower"] <= oe["ratio"] <= oe["ci_upper"]


def test_math_like_names_are_drawn_as_typed(api: ApiClient) -> None:
    psi = _svg_text(api.get("/risk-models/math-names/drift/psi.svg").content)
    for name in MATH_NAMES.values():
        assert name in psi, name  # the literal text, not a math rendering of it
    page = api.get("/dashboard/math-names").text
    start = page.index('id="psi-plot"')
    assert "age $x^2$" in page[start:] and r"diameter $\frac$ mm" in page[start:]
    assert "prior $x^2$ &lt;b&gt;breaks&lt;/b&gt; &amp; co" in page[start:]
    assert "<b>breaks" not in page  # inlined SVG: the name is text, never markup


def test_plots_draw_report_bodies_with_rounding_and_missing_values(api: ApiClient) -> None:
    """Second guard in service.plots: a limit a hair on the wrong side of its estimate (as the
    old Wilson formula gave at 0 events) and measures reported as None are still drawn."""
    from service.plots import drift_figure, psi_figure, reliability_figure, render

    report = api.get("/risk-models/low-prevalence/calibration").json()
    drift = api.get("/risk-models/low-prevalence/drift", params={"size": 300}).json()
    g = report["reliability"]["groups"][0]
    g["ci_lower"] = g["observed_rate"] + 6.9e-18  # the old edge rounding
    report["measures"]["calibration_slope"]["estimate"] = None  # not estimable
    report["measures"]["flexible_calibration"]["ici"] = None
    ok = [w for w in drift["windows"]["items"] if w["status"] == "ok"]
    assert len(ok) >= 2
    ok[0]["observed_expected"]["ci_lower"] = ok[0]["observed_expected"]["ratio"] + 1e-17
    ok[1]["calibration_in_the_large"].update(estimate=None, ci_lower=None, ci_upper=None)
    ok[-1]["observed_expected"]["ci_upper"] = None
    limits = {
        "alert_oe_low": 0.8,
        "alert_oe_high": 1.25,
        "alert_citl_tolerance": 0.2,
    }
    for fmt in ("svg", "png"):
        for fig in (reliability_figure(report), drift_figure(drift, limits), psi_figure(drift)):
            out = render(fig, fmt)  # type: ignore[arg-type]
            assert _svg_text(out) if fmt == "svg" else _valid_png(out)
    note = _svg_text(render(reliability_figure(report), "svg"))
    assert "calibration slope –" in note and "ICI –" in note
