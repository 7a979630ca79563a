"""Plain-text lines the demo prints: the fitted terms beside the truth, the riskiest
segments, and a compact reading of any JSON report (calibration, drift, refit decision)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

__all__ = ["describe_report", "fit_table", "riskiest_table"]


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
