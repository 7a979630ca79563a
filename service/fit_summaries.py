"""The JSON-ready parts of a stored version: term table, fit statistics, drift baselines.

* :func:`term_table_dict`: one entry per term (estimate, SE, z, p, interval, odds ratio);
* :func:`fit_summary` / :func:`fit_statistics_dict`: likelihoods, information criteria, the
  global LR test, and (with a pass over the data) the apparent AUC and Brier score;
* :func:`reference_distributions_and_ranges`: per feature the drift baseline
  (:mod:`service.stats.psi`) and the training range (numeric: min/max; categorical: counts).

Non-finite floats become ``None`` (:func:`finite`): the store refuses non-finite JSON. In the
term table an odds ratio (or limit) is ``None`` exactly when ``exp`` of its log-odds value
would overflow a double (above ~709.78; :func:`service.stats.inference.odds_ratio`), and
:func:`odds_ratio_warnings` names each such term for the version's warnings.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from service.data_io import NUMERIC_KINDS
from service.schemas import VersionSpec
from service.stats.columns import CodedLabels
from service.stats.fit import LogisticFit, global_test_rule
from service.stats.inference import LRTest, global_lr_test
from service.stats.metrics import auc, brier
from service.stats.psi import categorical_reference, numeric_reference

__all__ = [
    "drop_term_dicts",
    "finite",
    "fit_statistics_dict",
    "fit_summary",
    "odds_ratio_warnings",
    "reference_distributions_and_ranges",
    "term_table_dict",
]


def finite(value: float | None) -> float | None:
    """A float for JSON, with NaN/inf (and None) as ``None`` (the store refuses non-finite JSON)."""
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


def reference_distributions_and_ranges(
    spec: VersionSpec,
    columns: Mapping[str, np.ndarray],
    coded: Mapping[str, CodedLabels] | None = None,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Reference distributions (drift baselines) and training ranges per feature."""
    refs: dict[str, Any] = {}
    ranges: dict[str, Any] = {}
    for f in spec.features:
        values = columns[f.name]
        if f.kind in NUMERIC_KINDS:
            refs[f.name] = numeric_reference(values, field=f"data.columns.{f.name}").to_dict()
            ranges[f.name] = {
                "kind": f.kind,
                "min": float(values.min()),
                "max": float(values.max()),
                "n_obs": int(values.size),
            }
        else:
            c = (coded or {}).get(f.name)
            c = c if c is not None else CodedLabels.from_strings(list(map(str, values.tolist())))
            refs[f.name] = categorical_reference(c).to_dict()
            counts = c.counts()
            ranges[f.name] = {
                "kind": f.kind,
                "levels": {c.levels[j]: int(counts[j]) for j in np.argsort(c.levels)},
                "n_obs": int(values.size),
            }
    return refs, ranges


def fit_statistics_dict(
    fit: LogisticFit, y: np.ndarray, p: np.ndarray, weights: np.ndarray | None
) -> dict[str, Any]:
    """:func:`fit_summary` plus the apparent AUC and Brier score of the fitted ``p`` (n,)."""
    stats = fit_summary(fit)
    stats["apparent_auc"] = finite(auc(y, p, weights))
    stats["apparent_brier"] = finite(brier(y, p, weights))
    return stats


def fit_summary(fit: LogisticFit) -> dict[str, Any]:
    """Fit statistics that need no pass over the data (all but apparent AUC and Brier)."""
    g = global_lr_test(fit)
    stats: dict[str, Any] = {
        "n_obs": fit.n_obs,
        "n_events": float(fit.n_events),
        "sum_weights": float(fit.sum_weights),
        "method": fit.method,
        "ridge_lambda": float(fit.ridge_lambda),
        "loglik": finite(fit.loglik),
        "penalized_loglik": finite(fit.penalized_loglik),
        "null_loglik": finite(fit.null_loglik),
        "deviance": finite(fit.deviance),
        "null_deviance": finite(fit.null_deviance),
        "aic": finite(fit.aic),
        "bic": finite(fit.bic),
        "mcfadden_r2": finite(fit.mcfadden_r2),
        "converged": fit.converged,
        "iterations": fit.iterations,
        "stop_reason": fit.stop_reason,
        "global_lr_test": {
            "name": g.name,
            "statistic": finite(g.statistic),
            "df": g.df,
            "p_value": finite(g.p_value),
        },
        "global_test_rule": global_test_rule(fit.method),
    }
    return stats


def drop_term_dicts(drops: tuple[LRTest, ...]) -> list[dict[str, Any]]:
    """The drop-term LR tests as stored under ``fit_stats["drop_term_tests"]``."""
    return [
        {
            "name": d.name,
            "kind": d.kind or None,
            "dropped": list(d.dropped) or None,
            "statistic": finite(d.statistic),
            "df": d.df,
            "p_value": finite(d.p_value),
        }
        for d in drops
    ]


def term_table_dict(table: Any, fit: LogisticFit) -> dict[str, Any]:
    """A :class:`~service.stats.inference.TermTable` as stored (non-finite values as None)."""
    fields = (
        "estimate",
        "std_error",
        "z",
        "p_value",
        "ci_lower",
        "ci_upper",
        "odds_ratio",
        "odds_ratio_ci_lower",
        "odds_ratio_ci_upper",
    )
    return {
        "confidence_level": float(table.confidence_level),
        "ci_method": table.ci_method,
        "n_obs": fit.n_obs,
        "n_events": float(fit.n_events),
        "terms": [
            {"name": r.name, **{k: finite(getattr(r, k)) for k in fields}} for r in table.rows
        ],
    }


_OR_PARTS = (
    ("estimate", "odds_ratio", "odds ratio"),
    ("ci_lower", "odds_ratio_ci_lower", "lower odds-ratio limit"),
    ("ci_upper", "odds_ratio_ci_upper", "upper odds-ratio limit"),
)


def odds_ratio_warnings(table: Mapping[str, Any]) -> list[str]:
    """One warning per term whose odds ratio or limit is null while its log-odds value is not.

    ``table`` is a :func:`term_table_dict`; the cause is always ``exp`` overflowing a double.
    """
    out = []
    for t in table["terms"]:
        gone = [
            (t[lo], what) for lo, odds, what in _OR_PARTS if t[lo] is not None and t[odds] is None
        ]
        if gone:
            values = ", ".join(f"{what} exp({v:.6g})" for v, what in gone)
            out.append(
                f"term {t['name']!r}: {values} overflows a double (log-odds above 709.78) and "
                "is reported as null; its log-odds estimate and limits stand. A feature in raw "
                "units with a tiny range gives such coefficients: rescale it (e.g. per 0.001 "
                "unit) for readable odds ratios"
            )
    return out
