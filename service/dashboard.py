"""The server-rendered dashboard: models, versions, champion history, the latest calibration
report with its plots, open alerts, and the cautions every riskfit reader must see.

Pages are rendered with Jinja2 (autoescaped) from templates in ``service/templates`` and one
stylesheet in ``service/static``; plots are inlined as SVG so the page needs no further
requests and no script. The numbers shown are taken from the same JSON bodies the API
returns (``calibration_view``, ``drift_view``), never recomputed here.
"""

from __future__ import annotations

import re
from functools import lru_cache
from pathlib import Path
from typing import Any

from jinja2 import Environment, FileSystemLoader, select_autoescape
from markupsafe import Markup

from service import __version__
from service.plots import drift_figure, psi_figure, reliability_figure, render

__all__ = ["CAUTIONS", "STATIC_DIR", "index_page", "measure_rows", "model_page", "sign_in_page"]

TEMPLATES_DIR = Path(__file__).resolve().parent / "templates"
STATIC_DIR = Path(__file__).resolve().parent / "static"

#: The cautions of DESIGN.md, shown on every page.
CAUTIONS = (
    "A risk score supports a decision; it does not make it.",
    "Models used for credit, insurance, employment or health decisions fall under laws on "
    "fairness, explanation and validation; clinical use needs local validation and clinical "
    "oversight; infrastructure decisions rest with licensed engineers and local codes.",
    "Defer to local regulation and licensed practice.",
)


@lru_cache(maxsize=1)
def _env() -> Environment:
    env = Environment(
        loader=FileSystemLoader(TEMPLATES_DIR),
        autoescape=select_autoescape(["html"]),
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["num"] = _num
    return env


def _num(value: Any, digits: int = 4) -> str:
    """A measure for display: ``None`` as an en dash, floats to ``digits`` significant digits."""
    if value is None:
        return "–"
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def inline_svg(svg: bytes) -> Markup:
    """SVG bytes without the XML prolog and doctype, to place inside HTML."""
    text = svg.decode("utf-8")
    text = re.sub(r"^<\?xml[^>]*>\s*", "", text)
    text = re.sub(r"<!DOCTYPE[^>]*>\s*", "", text)
    return Markup(text)  # our own matplotlib output (it escapes text), not user input


def measure_rows(report: dict[str, Any]) -> list[dict[str, Any]]:
    """Rows of the key-measures table: name, estimate, interval, level, method, counts."""
    if report.get("status") != "ok":
        return []
    m = report["measures"]
    specs = (
        ("Observed / expected events", m["observed_expected"], "ratio", "ci_method"),
        ("Calibration-in-the-large", m["calibration_in_the_large"], "estimate", "model"),
        ("Calibration slope", m["calibration_slope"], "estimate", "model"),
        ("AUC (c-statistic)", m["auc"], "auc", "ci_method"),
        ("Brier score", m["probability_scores"], "brier", "method"),
        ("Scaled Brier", m["probability_scores"], "scaled_brier", None),
        ("Log loss", m["probability_scores"], "log_loss", None),
        ("Integrated calibration index", m["flexible_calibration"], "ici", "smoother"),
        ("E90 (90th percentile |curve − p|)", m["flexible_calibration"], "e90", None),
        ("Hosmer–Lemeshow statistic", m["hosmer_lemeshow"], "statistic", "grouping"),
        ("Spiegelhalter z", m["spiegelhalter"], "z", "method"),
    )
    rows = []
    for label, measure, key, method in specs:
        has_ci = "ci_lower" in measure
        rows.append(
            {
                "label": label,
                "key": key,
                "value": measure[key],
                "ci_lower": measure.get("ci_lower") if has_ci else None,
                "ci_upper": measure.get("ci_upper") if has_ci else None,
                "level": measure.get("confidence_level"),
                "method": measure.get(method) if method else None,
                "extra": _extra(key, measure),
            }
        )
    return rows


def _extra(key: str, measure: dict[str, Any]) -> str | None:
    if key == "statistic":
        p = measure.get("p_value")
        return f"df {measure['df']}, p = {_num(p, 3)}"
    if key == "z":
        return f"p = {_num(measure.get('p_value'), 3)}"
    return None


def _render(template: str, **context: Any) -> str:
    return _env().get_template(template).render(cautions=CAUTIONS, version=__version__, **context)


def index_page(
    models: list[dict[str, Any]], signed_in_as: str | None = None, csrf_token: str = ""
) -> str:
    """The list of models with their champion and open alerts (``csrf_token``: sign-out form)."""
    return _render("index.html", models=models, signed_in_as=signed_in_as, csrf_token=csrf_token)


def sign_in_page(*, next_path: str, error: str | None = None, csrf_token: str = "") -> str:
    """The sign-in form: one API key field; ``error`` says why the last attempt failed."""
    return _render(
        "sign_in.html", next_path=next_path, error=error, signed_in_as=None, csrf_token=csrf_token
    )


def model_page(
    *,
    model: dict[str, Any],
    versions: list[dict[str, Any]],
    history: list[dict[str, Any]],
    report: dict[str, Any],
    drift: dict[str, Any],
    alerts: dict[str, Any],
    thresholds: dict[str, Any],
    signed_in_as: str | None = None,
    csrf_token: str = "",
) -> str:
    """One model's page (see module docstring); ``csrf_token`` goes in the sign-out form."""
    plots = {
        "reliability": inline_svg(render(reliability_figure(report), "svg")),
        "measures": inline_svg(render(drift_figure(drift, thresholds), "svg")),
        "psi": inline_svg(render(psi_figure(drift), "svg")),
    }
    return _render(
        "model.html",
        model=model,
        versions=versions,
        history=history,
        report=report,
        rows=measure_rows(report),
        drift=drift,
        alerts=alerts,
        plots=plots,
        signed_in_as=signed_in_as,
        csrf_token=csrf_token,
    )
