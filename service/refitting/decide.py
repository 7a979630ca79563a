"""The decision: closed test on the development part, gates on the holdout, promote or not.

1. Closed testing (Vergouwe et al. 2017, :func:`service.stats.updating.closed_test`) on the
   development part chooses the update for ``method="auto"``; a forced method is fitted
   as asked, the closed test still being reported.
2. ``unchanged`` chosen: the champion is kept and no version is written (nothing to gate).
3. Otherwise the challenger (fitted on the development part) and the champion predict the
   holdout; :func:`service.stats.updating.evaluate_gates` compares them. The challenger that
   was gated is the one stored: it is not refitted on the holdout afterwards.
4. ``promote``: ``if-better`` promotes when every gate passes, ``never`` stores without
   promoting, ``always`` promotes whatever the gates say (the reasons say so).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

from scipy.special import expit

from service.errors import FitError
from service.fitting import finite
from service.refitting.challenger import Challenger, fit_challenger
from service.refitting.data import RefitData
from service.schemas.refits import RefitCreate
from service.scoring import LoadedVersion
from service.stats.updating import (
    ClosedTestResult,
    GateConfig,
    GateReport,
    closed_test,
    evaluate_gates,
)

__all__ = ["Decision", "decide", "gate_config"]


def gate_config(request: RefitCreate) -> GateConfig:
    """The request's gate overrides on top of :class:`GateConfig`'s defaults."""
    overrides = {k: v for k, v in request.gates.model_dump().items() if v is not None}
    if "slope_bounds" in overrides:
        overrides["slope_bounds"] = tuple(overrides["slope_bounds"])
    return GateConfig(**overrides)


@dataclass(frozen=True)
class Decision:
    """What :func:`decide` found; ``challenger`` is None when the champion is kept."""

    body: dict[str, Any]
    challenger: Challenger | None
    promote: bool


def _closed(data: RefitData, v: LoadedVersion, alpha: float) -> ClosedTestResult:
    dev = data.development
    try:
        return closed_test(dev.X, dev.y, v.coef, alpha=alpha)
    except FitError as exc:
        exc.message = (
            f"the closed test needs a full refit on the development part "
            f"({dev.n_obs} outcomes, {dev.n_events} events), which failed: {exc.message}"
        )
        exc.remedy = (
            "widen the window for more outcomes, or ask for method 'intercept' or "
            "'recalibrate' (they estimate one or two parameters)"
        )
        raise


def _closed_dict(ct: ClosedTestResult) -> dict[str, Any]:
    return {
        "procedure": ct.method,
        "alpha": ct.alpha,
        "chosen": ct.chosen,
        "n_obs": ct.n_obs,
        "n_events": ct.n_events,
        "tests": [
            {**asdict(t), "statistic": finite(t.statistic), "p_value": finite(t.p_value)}
            for t in ct.tests
        ],
        "models": [
            {
                "method": m.method,
                "loglik": finite(m.loglik),
                "n_parameters": m.df,
                "intercept": finite(m.intercept),
                "slope": finite(m.slope),
                "converged": m.converged,
            }
            for m in ct.models
        ],
        "reasons": list(ct.reasons),
    }


def _gates_dict(report: GateReport) -> dict[str, Any]:
    cfg = report.config.to_dict()
    cfg["slope_bounds"] = list(cfg["slope_bounds"])
    return {
        "passed": report.passed,
        "confidence_level": report.confidence_level,
        "n_obs": report.n_obs,
        "n_events": report.n_events,
        "config": cfg,
        "results": [
            {k: finite(x) if isinstance(x, float) else x for k, x in asdict(g).items()}
            for g in report.gates
        ],
    }


def _challenger_dict(c: Challenger, v: LoadedVersion) -> dict[str, Any]:
    return {
        "method": c.method,
        "intercept": c.intercept,
        "slope": c.slope,
        "fitted_on": "development",
        "loglik_development": finite(c.fit.loglik),
        "coef": dict(zip(v.term_names, (float(x) for x in c.coef), strict=True)),
    }


def decide(
    request: RefitCreate, data: RefitData, v: LoadedVersion, confidence_level: float
) -> Decision:
    """Run steps 1-4 of the module docstring; nothing is written."""
    ct = _closed(data, v, request.alpha)
    reasons = [
        f"closed test (development part, n = {data.development.n_obs}): " + r for r in ct.reasons
    ]
    chosen = ct.chosen if request.method == "auto" else request.method
    if request.method != "auto":
        reasons.append(
            f"method {request.method!r} was asked for; the closed test chose {ct.chosen!r}"
        )
    body: dict[str, Any] = {
        "method_requested": request.method,
        "method_chosen": chosen,
        "closed_test": _closed_dict(ct),
        "challenger": None,
        "gates": None,
    }
    if chosen == "unchanged":
        reasons.append(
            f"decision keep: the unchanged champion (version {v.number}) is not significantly "
            "worse than a full refit, so no new version is written"
        )
        body.update(decision="keep", reasons=reasons)
        return Decision(body, None, False)
    dev, hold = data.development, data.holdout
    challenger = fit_challenger(chosen, dev.X, dev.y, v, confidence_level)
    report = evaluate_gates(
        hold.y, expit(hold.X @ v.coef), expit(hold.X @ challenger.coef), gate_config(request)
    )
    reasons += [f"gate {g.name} (holdout, n = {hold.n_obs}): {g.reason}" for g in report.gates]
    failed = [g.name for g in report.gates if not g.passed]
    if request.promote == "never":
        promote, why = False, "promote is 'never'"
    elif request.promote == "always":
        promote = True
        why = "promote is 'always'" + (f" (gates failed: {', '.join(failed)})" if failed else "")
    else:
        promote = report.passed
        why = "every gate passed" if promote else f"gates failed: {', '.join(failed)}"
    decision = "promote" if promote else "hold"
    reasons.append(
        f"decision {decision}: {chosen} update of version {v.number} "
        + ("promoted" if promote else "stored, champion stays")
        + f" ({why})"
    )
    body.update(
        decision=decision,
        reasons=reasons,
        challenger=_challenger_dict(challenger, v),
        gates=_gates_dict(report),
    )
    return Decision(body, challenger, promote)
