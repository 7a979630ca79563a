"""Plain-text lines the demo prints: the fitted terms beside the truth, the riskiest
segments, and a compact reading of any JSON report (calibration, drift, refit decision)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

__all__ = [
    "calibration_lines",
    "describe_report",
    "drift_lines",
    "fit_table",
    "refit_lines",
    "riskiest_table",
]


def fit_table(term_table: Mapping[str, Any], truth: Mapping[str, float]) -> list[str]:
    """One line per term: estimate, its interval, odds ratio, the true value, and whether the
    interval covers the truth."""
    level = float(term_table["confidence_level"])
    head = (
        f"{'term':<26}{'estimate':>9}  {f'{level:.0%} interval':<19}{'odds ratio':>10}{'truth':>8}"
    )
    lines = [head]
    for term in term_table["terms"]:
        true = truth.get(term["name"])
        interval = f"[{term['ci_lower']:.3f}, {term['ci_upper']:.3f}]"
        if true is None:
            known = ""
        else:
            hit = term["ci_lower"] <= true <= term["ci_upper"]
            known = f"{true:>8.3f}  {'covered' if hit else 'not covered'}"
        lines.append(
            f"{term['name']:<26}{term['estimate']:>9.3f}  {interval:<19}"
            f"{term['odds_ratio']:>10.2f}{known}"
        )
    lines.append(f"({term_table['ci_method']} intervals; truth = the simulation's coefficients)")
    return lines


def riskiest_table(
    scores: Sequence[Mapping[str, Any]], segments: Mapping[str, np.ndarray], *, top: int
) -> list[str]:
    """The ``top`` highest probabilities with their interval and the segment's attributes."""
    order = np.argsort([-s["probability"] for s in scores], kind="stable")[:top]
    lines = [f"{'segment':<12}{'risk':>7}  {'interval':<16}description"]
    for i in order:
        s = scores[int(i)]
        what = (
            f"{segments['material'][i]}, {segments['age_years'][i]:.0f} years, "
            f"{segments['diameter_mm'][i]:.0f} mm, {segments['soil'][i]} corrosivity, "
            f"{segments['prior_breaks_5y'][i]} breaks in 5 years"
        )
        interval = f"[{s['ci_lower']:.1%}, {s['ci_upper']:.1%}]"
        lines.append(
            f"{segments['segment_id'][i]:<12}{s['probability']:>7.1%}  {interval:<16}{what}"
        )
    return lines


def describe_report(body: Mapping[str, Any], *, depth: int = 0, limit: int = 40) -> list[str]:
    """Scalars as ``name: value``; nested objects indented; lists by their length, with the
    first few items of a list of objects shown (alerts, reasons, gates)."""
    lines: list[str] = []
    pad = "  " * depth
    for name, value in body.items():
        if len(lines) >= limit:
            lines.append(f"{pad}...")
            break
        if isinstance(value, Mapping):
            lines.append(f"{pad}{name}:")
            lines.extend(describe_report(value, depth=depth + 1, limit=limit // 2))
        elif isinstance(value, list):
            if value and all(not isinstance(v, Mapping | list) for v in value) and len(value) <= 6:
                lines.append(f"{pad}{name}: {', '.join(_scalar(v) for v in value)}")
                continue
            lines.append(f"{pad}{name}: {len(value)} item(s)")
            for item in value[:3]:
                if isinstance(item, Mapping):
                    lines.append(f"{pad}  - " + "; ".join(_flat(item)))
                else:
                    lines.append(f"{pad}  - {_scalar(item)}")
        else:
            lines.append(f"{pad}{name}: {_scalar(value)}")
    return lines


def _flat(item: Mapping[str, Any]) -> list[str]:
    return [f"{k}={_scalar(v)}" for k, v in item.items() if not isinstance(v, Mapping | list)]


def _scalar(value: Any) -> str:
    if isinstance(value, float) and math.isfinite(value):
        return f"{value:.4g}"
    return str(value)


def calibration_lines(body: Mapping[str, Any]) -> list[str]:
    """The calibration report's headline measures, each with its interval or test."""
    counts = body.get("counts", {})
    n, events = counts.get("n", "?"), counts.get("events", "?")
    lines = [f"{n} scored segments with an outcome, {events} breaks"]
    if body.get("status") != "ok" or not body.get("measures"):
        return [*lines, f"{body.get('message', 'no measures')} {body.get('remedy', '')}".strip()]
    m = body["measures"]
    picks = (
        ("observed / expected", m.get("observed_expected"), "ratio"),
        ("calibration-in-the-large", m.get("calibration_in_the_large"), "estimate"),
        ("calibration slope", m.get("calibration_slope"), "estimate"),
        ("c-statistic (AUC)", m.get("auc"), "auc"),
    )
    for label, measure, key in picks:
        if measure and isinstance(measure.get(key), float | int):
            lines.append(f"{label}: {_interval(measure, key)}")
    scores = m.get("probability_scores") or {}
    if "brier" in scores:
        scaled = _scalar(scores.get("scaled_brier"))
        lines.append(f"Brier score: {_scalar(scores['brier'])} (scaled {scaled})")
    for label, name, stat in (
        ("Hosmer-Lemeshow", "hosmer_lemeshow", "statistic"),
        ("Spiegelhalter", "spiegelhalter", "z"),
    ):
        test = m.get(name) or {}
        if stat in test:
            lines.append(
                f"{label}: {stat} {_scalar(test[stat])}, p = {_scalar(test.get('p_value'))}"
            )
    return lines


def drift_lines(body: Mapping[str, Any]) -> list[str]:
    """Observed/expected per window, the CUSUM's state and the alert conditions found."""
    lines: list[str] = []
    windows = body.get("windows", {})
    ratios = [
        w["observed_expected"]["ratio"]
        for w in windows.get("items", [])
        if isinstance(w.get("observed_expected"), Mapping) and "ratio" in w["observed_expected"]
    ]
    if ratios:
        size = f"{windows.get('size', '')} {windows.get('unit', '')}".strip()
        lines.append(
            f"observed / expected by window of {size}: " + ", ".join(f"{r:.2f}" for r in ratios)
        )
    for side in ("up", "down"):
        cusum = body.get("cusum", {}).get(side)
        if isinstance(cusum, Mapping):
            signals = cusum.get("signals") or []
            first = cusum.get("first_signal")
            when = "no signal" if first is None else f"first signal at record {first}"
            lines.append(
                f"CUSUM {side} (odds ratio {_scalar(cusum.get('odds_ratio'))}, limit h = "
                f"{_scalar(cusum.get('h'))}): {len(signals)} signal(s), {when}"
            )
    features = body.get("input_drift", {}).get("features", [])
    psi = [f"{f['feature']} {_scalar(f['psi'])}" for f in features if "psi" in f]
    if psi:
        lines.append("input drift (PSI): " + ", ".join(psi))
    conditions = body.get("alerts", {}).get("conditions", [])
    measures = sorted({c.get("measure", "?") for c in conditions})
    lines.append(
        f"alert conditions: {len(conditions)}" + (f" ({', '.join(measures)})" if measures else "")
    )
    return lines or describe_report(body)


def refit_lines(body: Mapping[str, Any]) -> list[str]:
    """The refit decision: method chosen, what happened to the champion, and why."""
    if "decision" not in body:
        return describe_report(body)
    lines = [
        f"closed test chose: {body.get('method_chosen')}; decision: {body['decision']} "
        f"(champion version {body.get('champion_before')} -> {body.get('champion_after')})"
    ]
    lines.extend(f"- {reason}" for reason in body.get("reasons", []))
    return lines


def _interval(measure: Mapping[str, Any], key: str) -> str:
    text = _scalar(measure[key])
    if "ci_lower" in measure and "ci_upper" in measure:
        text += f" [{_scalar(measure['ci_lower'])}, {_scalar(measure['ci_upper'])}]"
    return text
