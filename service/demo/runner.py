"""Walk a newcomer through riskfit over its public HTTP API with the water-mains scenario.

Steps (each printed in plain words through ``log``):

1. year one: draw the network and its breaks, fit version 1 of ``water-mains``
   (``POST /risk-models/{model}/versions``) and compare the estimates with the known truth;
2. year two: score every segment with the champion (``POST .../scores``, one client key per
   segment and year) and list the riskiest;
3. the harsher winter happens: send the observed breaks (``POST .../outcomes``);
4. the calibration report (``GET .../calibration``) and the drift report (``GET .../drift``);
5. a scheduled refit (``POST .../refits``, ``method: auto``) and its decision.

Endpoints the running service does not offer (checked in ``/openapi.json``) are skipped and
the skip is reported. The runner talks HTTP only: any :class:`httpx.Client` works, against a
live server or :func:`service.demo.inprocess.in_process_client`.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import httpx
import numpy as np

from service.config import Settings
from service.demo.inprocess import in_process_client
from service.demo.payloads import columns, outcome_batches, record_batches
from service.demo.report import (
    calibration_lines,
    drift_lines,
    fit_table,
    refit_lines,
    riskiest_table,
)
from service.demo.scenario import (
    DEFAULT_SEED,
    FEATURES,
    MODEL_NAME,
    TRUE_MODEL,
    TRUE_MODEL_YEAR2,
    feature_spec,
    generate_segments,
)

__all__ = ["DemoError", "DemoSummary", "run_demo", "seed_database"]

Log = Callable[[str], None]
BATCH = 1_000
RETRY_PAUSES = (1.0, 3.0)  # seconds before the second and third attempt


class DemoError(RuntimeError):
    """The service refused a demo step; the message quotes its answer."""


@dataclass(frozen=True)
class DemoSummary:
    """What one demo run did: counts, the version fitted, the reports it fetched."""

    model: str
    seed: int
    fitted_version: int | None = None
    n_train: int = 0
    n_train_breaks: int = 0
    n_scored: int = 0
    mean_predicted: float | None = None
    n_outcomes: int = 0
    n_breaks_year2: int = 0
    calibration: dict[str, Any] | None = None
    drift: dict[str, Any] | None = None
    refit: dict[str, Any] | None = None
    steps: tuple[str, ...] = ()
    skipped: tuple[str, ...] = ()


@dataclass
class _Run:
    client: httpx.Client
    log: Log
    model: str
    paths: set[tuple[str, str]]
    facts: dict[str, Any] = field(default_factory=dict)
    steps: list[str] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)

    def offers(self, method: str, path: str) -> bool:
        return (method.lower(), _shape(path)) in self.paths

    def call(self, method: str, path: str, **kwargs: Any) -> dict[str, Any]:
        """One request; a 503 (store busy) is retried after a pause, as its remedy says."""
        url = path.format(model=self.model)
        response = self.client.request(method, url, **kwargs)
        for pause in RETRY_PAUSES:
            if response.status_code != 503:
                break
            self.log(f"   the service is busy (503); retrying in {pause:.0f} s")
            time.sleep(pause)
            response = self.client.request(method, url, **kwargs)
        if response.status_code >= 400:
            raise DemoError(
                f"{method} {url} answered {response.status_code}: {response.text[:500]}"
            )
        body: dict[str, Any] = response.json()
        return body

    def skip(self, method: str, path: str, what: str) -> None:
        reason = f"{what}: the service has no {method} {path} yet"
        self.skipped.append(reason)
        self.log(f"   skipped - {reason}")


def run_demo(
    client: httpx.Client | None = None,
    *,
    url: str | None = None,
    seed: int = DEFAULT_SEED,
    n_train: int = 4_000,
    model: str = MODEL_NAME,
    log: Log = print,
    api_key: str | None = None,
) -> DemoSummary:
    """Run the demo against ``client`` (or a new client for ``url``) and summarise it.

    ``api_key`` is sent as ``Authorization: Bearer`` on the client made for ``url`` (a
    ``client`` brings its own headers). Raises :class:`DemoError` when the service is not
    there or refuses a step, quoting its answer. If the model already exists, nothing is
    written and the summary says so in ``skipped``.
    """
    if client is None:
        headers = {"Authorization": f"Bearer {api_key}"} if api_key else {}
        base = url or "http://127.0.0.1:8000"
        with httpx.Client(base_url=base, timeout=300.0, headers=headers) as own:
            return run_demo(own, seed=seed, n_train=n_train, model=model, log=log)
    try:
        spec = client.get("/openapi.json")
    except httpx.TransportError as exc:
        raise DemoError(
            f"no riskfit answers at {client.base_url} ({exc}); start one with `riskfit serve`"
        ) from exc
    if spec.status_code != 200:
        raise DemoError(f"no riskfit at {client.base_url}: /openapi.json -> {spec.status_code}")
    paths = {(m, _shape(p)) for p, ops in spec.json()["paths"].items() for m in ops}
    run = _Run(client=client, log=log, model=model, paths=paths)
    log(
        f"riskfit demo at {client.base_url}: water-main break risk for a municipal utility\n"
        f"(invented data drawn by seeded code, seed {seed}; model {model!r})"
    )
    existing = client.get(f"/risk-models/{model}")
    if existing.status_code in (401, 403):
        raise DemoError(
            f"{client.base_url} needs an API key with the modeler role "
            f"(answered {existing.status_code}: {existing.text[:300]}); pass one as api_key "
            "(`riskfit demo --api-key` or RISKFIT_API_KEY)"
        )
    if existing.status_code == 200:
        body = existing.json()
        reason = (
            f"model {model!r} already exists (champion version {body.get('champion_version')}); "
            "the demo only writes to a store without it"
        )
        log(f"nothing to do: {reason}")
        return DemoSummary(model=model, seed=seed, skipped=(reason,))
    year_one = generate_segments(n_train, year=1, seed=seed)
    _fit(run, year_one)
    year_two = generate_segments(n_train, year=2, seed=seed)
    _score(run, year_two)
    _outcomes(run, year_two)
    _reports(run)
    _refit(run)
    log("\ndone. The service documents its API at /docs.")
    return DemoSummary(
        model=model, seed=seed, steps=tuple(run.steps), skipped=tuple(run.skipped), **run.facts
    )


def _fit(run: _Run, segments: Mapping[str, np.ndarray]) -> None:
    n, breaks = len(segments["outcome"]), int(segments["outcome"].sum())
    run.log(
        f"\n1. Year one. The utility's {n} pipe segments had {breaks} breaks "
        f"({breaks / n:.1%}). Fitting a logistic model by maximum likelihood:"
    )
    started = time.monotonic()
    body = run.call(
        "POST",
        "/risk-models/{model}/versions",
        json={
            "features": feature_spec(),
            "outcome": "outcome",
            "options": {"method": "mle", "confidence_level": 0.95},
            "note": "demo: year-one segments and breaks",
            "description": "Water-main breaks within twelve months (demo scenario)",
            "data": {"columns": columns(segments, (*FEATURES, "outcome"))},
        },
    )
    stats = body["fit_statistics"]
    run.log(
        f"   version {body['number']} fitted on {stats['n_obs']} segments "
        f"({stats['n_events']:.0f} breaks) in {time.monotonic() - started:.1f} s; "
        f"{'converged' if stats['converged'] else 'NOT converged: ' + stats['stop_reason']}"
    )
    for line in fit_table(body["term_table"], TRUE_MODEL.coef):
        run.log("   " + line)
    run.facts.update(fitted_version=body["number"], n_train=n, n_train_breaks=breaks)
    run.steps.append("fit")


def _score(run: _Run, segments: Mapping[str, np.ndarray]) -> None:
    n = len(segments["segment_id"])
    run.log(f"\n2. Year two begins. Scoring all {n} segments with the champion:")
    scores: list[dict[str, Any]] = []
    for rows in record_batches(segments, batch=BATCH):
        body = run.call("POST", "/risk-models/{model}/scores", json={"records": rows})
        scores.extend(body["scores"])
    probability = np.array([s["probability"] for s in scores])
    run.log(
        f"   {len(scores)} scores logged (one score_id each); predicted breaks this year: "
        f"{probability.sum():.0f} ({probability.mean():.1%} on average). Riskiest segments:"
    )
    for line in riskiest_table(scores, segments, top=5):
        run.log("   " + line)
    run.facts.update(n_scored=len(scores), mean_predicted=float(probability.mean()))
    run.steps.append("score")


def _outcomes(run: _Run, segments: Mapping[str, np.ndarray]) -> None:
    path = "/risk-models/{model}/outcomes"
    breaks = int(segments["outcome"].sum())
    n = len(segments["outcome"])
    expected = run.facts["mean_predicted"] * n
    run.log(
        f"\n3. The year passes with {TRUE_MODEL_YEAR2.description}.\n"
        f"   {breaks} of {n} segments broke ({breaks / n:.1%}); version "
        f"{run.facts['fitted_version']} expected {expected:.0f} "
        f"(observed / expected = {breaks / expected:.2f})."
    )
    run.facts.update(n_breaks_year2=breaks)
    if not run.offers("POST", path):
        run.skip("POST", path, "joining the observed breaks to their scores")
        return
    sent, accepted = 0, 0
    for rows in outcome_batches(segments, batch=BATCH):
        body = run.call("POST", path, json={"outcomes": rows})
        sent += len(rows)
        accepted += int(body.get("counts", {}).get("accepted", 0))
    run.log(f"   sent {sent} outcomes by key; {accepted} joined their scores")
    run.facts.update(n_outcomes=sent)
    run.steps.append("outcomes")


def _reports(run: _Run) -> None:
    run.log("\n4. How well does version 1 describe year two?")
    reports = (
        ("calibration", "calibration report", calibration_lines),
        ("drift", "drift report", drift_lines),
    )
    for name, what, describe in reports:
        path = f"/risk-models/{{model}}/{name}"
        if not run.offers("GET", path):
            run.skip("GET", path, what)
            continue
        body = run.call("GET", path)
        run.log(f"   {what}:")
        for line in describe(body):
            run.log("     " + line)
        run.facts[name] = body
        run.steps.append(name)


def _refit(run: _Run) -> None:
    path = "/risk-models/{model}/refits"
    run.log("\n5. The nightly refit: the smallest update the new outcomes support.")
    if not run.offers("POST", path):
        run.skip("POST", path, "scheduled refit")
        return
    body = run.call("POST", path, json={"method": "auto", "promote": "if-better"})
    for line in refit_lines(body):
        run.log("   " + line)
    run.facts["refit"] = body
    run.steps.append("refit")


def _shape(path: str) -> str:
    """``/risk-models/{name}/scores`` -> ``/risk-models/{}/scores`` (parameter names vary)."""
    parts = path.split("/")
    return "/".join("{}" if p.startswith("{") and p.endswith("}") else p for p in parts)


def seed_database(
    settings: Settings, *, seed: int = DEFAULT_SEED, n_train: int = 4_000, log: Log = print
) -> DemoSummary:
    """``riskfit serve --demo``: run the demo in-process on ``settings``' store (no socket).

    Does nothing but say so when the demo model already exists.
    """
    from service.app import create_app  # the app imports the whole service; only load it here

    with in_process_client(create_app(settings)) as client:
        return run_demo(client, seed=seed, n_train=n_train, log=log)
