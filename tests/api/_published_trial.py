"""Run one published-data case through HTTP and measure it against its reference.

``run_case`` posts the fit, reads the stored version back, scores the case's records and
returns every number the checks need; ``tests/api/test_published_datasets.py`` asserts on
them and ``tests/benchmarks/trial_published.py`` prints them as a table.
"""

from __future__ import annotations

import io
import json
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from tests.api._published_cases import (
    Case,
    Reference,
    arrays,
    reference_design,
    scipy_penalised,
    statsmodels_mle,
)
from tests.api.conftest import ApiClient

# Explicit tolerances of the trial (the reference solvers converge to ~1e-12 relative).
COEF_RTOL = 1e-6
SE_RTOL = 1e-5
PROB_ATOL = 1e-8
LOGLIK_ATOL = 1e-6  # (penalised) log-likelihood at the maximum, absolute


_REFERENCES: dict[tuple[Any, ...], Reference] = {}


@dataclass
class Trial:
    case: Case
    status: int
    body: dict[str, Any]
    fit_seconds: float = 0.0  # the POST alone
    read_back: int | None = None
    read_back_equal: bool | None = None
    names: list[str] = field(default_factory=list)
    reference_names: list[str] = field(default_factory=list)
    reference: Reference | None = None
    coef: np.ndarray | None = None
    se: np.ndarray | None = None
    score_status: int | None = None
    scores: list[dict[str, Any]] = field(default_factory=list)
    expected_scores: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def coef_rel(self) -> float:
        """Worst relative difference of the coefficients (scaled by max(|ref|, 1e-3 max|ref|))."""
        assert self.coef is not None and self.reference is not None
        return _worst_rel(self.coef, self.reference.coef)

    @property
    def se_rel(self) -> float:
        assert self.se is not None and self.reference is not None
        return _worst_rel(self.se, self.reference.se)

    @property
    def objective_gap(self) -> float:
        """Reference maximum minus the engine's (penalised) log-likelihood: > 0 means the
        engine stopped below the maximum the independent solver found."""
        assert self.reference is not None
        stats = self.body["fit_statistics"]
        got = stats["loglik"] if self.case.method == "mle" else stats["penalized_loglik"]
        return float(self.reference.objective - got)

    @property
    def prob_abs(self) -> float:
        """Worst absolute difference of probability and interval limits over the records."""
        worst = 0.0
        for k in ("probability", "ci_lower", "ci_upper"):
            got = np.array([s[k] for s in self.scores], dtype=float)
            worst = max(worst, float(np.max(np.abs(got - self.expected_scores[k]))))
        return worst


def _worst_rel(got: np.ndarray, ref: np.ndarray) -> float:
    floor = 1e-3 * float(np.max(np.abs(ref)))
    return float(np.max(np.abs(got - ref) / np.maximum(np.abs(ref), floor)))


def fit_body(case: Case) -> dict[str, Any]:
    return {**case.spec, "data": {"columns": case.columns}}


def post_fit(api: ApiClient, case: Case, model: str, transport: str = "json") -> Any:
    """The fit request as JSON columns, or as a multipart upload of the data written by pandas
    (``csv``: ``DataFrame.to_csv``; ``parquet``: ``DataFrame.to_parquet``) with the spec part."""
    url = f"/risk-models/{model}/versions"
    if transport == "json":
        return api.post(url, json=fit_body(case))
    df = pd.DataFrame(case.columns)
    buf = io.BytesIO()
    if transport == "csv":
        df.to_csv(buf, index=False)
    else:
        df.to_parquet(buf, index=False)
    return api.post(
        url,
        data={"spec": json.dumps(case.spec)},
        files={"data": (f"{case.name}.{transport}", buf.getvalue(), "application/octet-stream")},
    )


def run_case(api: ApiClient, case: Case, model: str, transport: str = "json") -> Trial:
    """POST the fit; on 201: GET it back, fit the reference, score the records."""
    t0 = time.perf_counter()
    r = post_fit(api, case, model, transport)
    trial = Trial(case, r.status_code, r.json(), fit_seconds=time.perf_counter() - t0)
    if r.status_code != 201:
        return trial
    body = trial.body
    number = body["number"]
    got = api.get(f"/risk-models/{model}/versions/{number}")
    trial.read_back = got.status_code
    trial.read_back_equal = got.status_code == 200 and got.json() == body
    terms = body["term_table"]["terms"]
    trial.names = [t["name"] for t in terms]
    X = reference_design(case.spec, case.columns)
    trial.reference_names = list(X.columns)
    if set(trial.names) != set(X.columns):
        return trial
    a = arrays(case)
    Xn = X[trial.names].to_numpy()
    key = (case.name, case.method, json.dumps(case.spec, sort_keys=True), tuple(trial.names))
    if key not in _REFERENCES:  # the same case on SQLite and PostgreSQL: solve it once
        if case.method == "mle":
            ref = statsmodels_mle(Xn, a["y"], a["w"], a["offset"])
        else:
            lam = float(case.spec.get("options", {}).get("ridge_lambda", 0.0))
            ref = scipy_penalised(Xn, a["y"], a["w"], a["offset"], case.method, lam)
        _REFERENCES[key] = ref
    trial.reference = _REFERENCES[key]
    trial.coef = np.array([t["estimate"] for t in terms], dtype=float)
    trial.se = np.array(
        [np.nan if t["std_error"] is None else t["std_error"] for t in terms], dtype=float
    )
    if case.score_records:
        level = 0.95
        s = api.post(
            f"/risk-models/{model}/scores",
            json={"records": case.score_records, "version": number, "confidence_level": level},
        )
        trial.score_status = s.status_code
        if s.status_code == 200:
            trial.scores = s.json()["scores"]
            cols = {k: [rec[k] for rec in case.score_records] for k in case.score_records[0]}
            b = arrays(case, cols)
            # levels and references as learned from the training rows: build the design of
            # training + scored rows together and keep the scored ones
            both = {k: [*case.columns[k], *cols[k]] for k in cols}
            n_train = len(next(iter(case.columns.values())))
            Xs = reference_design(case.spec, both, n_train)[trial.names]
            Xs = Xs.iloc[-len(case.score_records) :]
            trial.expected_scores = trial.reference.predict(Xs.to_numpy(), b["offset"], level)
    return trial


def status_of(trial: Trial) -> str:
    """One word for the table: ok, refused-ok, or what went wrong."""
    case = trial.case
    if case.expect == "rank_deficient":
        if trial.status == 422 and trial.body["error"]["code"] == "rank_deficient":
            return "refused-ok" if remedy_restores_rank(trial) else "REFUSED, remedy fails"
        return f"WRONG: {trial.status} where the rank deficiency should be refused"
    if case.expect == "separation":
        if trial.status == 422 and trial.body["error"]["code"] == "separation":
            return "refused-ok"
        return f"WRONG: {trial.status} where separation should be refused"
    if trial.status != 201:
        err = trial.body.get("error", {})
        return f"FAIL {trial.status} {err.get('code')}"
    if not trial.read_back_equal:
        return f"FAIL read-back {trial.read_back}"
    if trial.coef is None or trial.reference is None:
        return "FAIL term names differ"
    bad = []
    if not trial.body["fit_statistics"]["converged"]:
        bad.append("not converged")
    if not trial.reference.converged:
        bad.append(f"reference not converged ({trial.reference.note})")
    if not abs(trial.objective_gap) <= LOGLIK_ATOL:
        bad.append("loglik")
    if not trial.coef_rel <= COEF_RTOL:
        bad.append("coef")
    if not trial.se_rel <= SE_RTOL:
        bad.append("se")
    if case.score_records and (trial.score_status != 200 or not trial.prob_abs <= PROB_ATOL):
        bad.append(f"scores {trial.score_status}")
    return "ok" if not bad else "FAIL " + ", ".join(bad)


def remedy_restores_rank(trial: Trial) -> bool:
    """The rank refusal's remedy (remove the terms in ``details.remove``, one of each
    collinear group) done on the independent design: it leaves full column rank, no group is
    named twice, and each removed term belongs to its own group."""
    details = trial.body["error"]["details"]
    groups = [tuple(g) for g in details["groups"]]
    if len(set(groups)) != len(groups) or len(details["remove"]) != len(groups):
        return False
    if not all(r in g for r, g in zip(details["remove"], groups, strict=True)):
        return False
    X = reference_design(trial.case.spec, trial.case.columns)
    drop = set(details["remove"])
    kept = X[[c for c in X.columns if c not in drop]].to_numpy()
    return bool(np.linalg.matrix_rank(kept) == kept.shape[1])
