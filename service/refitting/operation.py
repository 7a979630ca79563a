"""Domain operation: one refit of a model — lock, data, decision, store, answer.

    refuse bad requests -> (not a dry run) take the model's refit lock (409 when held)
    -> champion + window data -> run key -> an identical earlier refit? answer it again
    -> decide (closed test, gates) -> store run, challenger version, champion change at once

Idempotency: the *run key* is SHA-256 of the request fingerprint (canonical JSON of the body
without ``dry_run``) and the data fingerprint of the window's rows. The newest succeeded run
with the same key is answered again (``replayed: true``, nothing new stored) when the
champion is still the one it left (its ``champion_after``: the parent it kept, or the
challenger it promoted); after any other champion change the refit runs afresh.
The run key is what ``refit_run.request_fingerprint`` holds; the answer reports the request
and data fingerprints separately.

Atomicity: the claim of the model's refit lock records the run as ``running`` (one short
transaction, :func:`models_store.refits.claim_refit`); every other write (the run's result, the
version, the champion change) happens in one transaction after the computation, which first
confirms that this refit still holds the lock (a refit that lost it stores nothing: 409), and a
challenger version is committed only after its answer (the body of ``GET .../versions/{n}``)
was built and validated from the flushed rows. A refused or failed refit leaves only its run,
``failed`` with the error; a replayed request leaves nothing (its ``running`` record is
deleted); dry runs write nothing at all. The lock is taken before the session writes, as
:mod:`models_store.refits` requires.

Lease: :class:`service.refitting.lease.LeaseKeeper` renews the lock every third of its lease
(``RISKFIT_REFIT_LOCK_LEASE_SECONDS``) while the refit runs; a refit whose process dies stops
renewing, and the next refit, one lease later, takes the lock over and records the dead one
as ``failed`` (``refit_interrupted``).
"""

from __future__ import annotations

import hashlib
import json
import logging
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session

from models_store.champions import set_champion
from models_store.orm import ModelVersion, RefitRun, RiskModel
from models_store.refits import (
    DEFAULT_LOCK_TTL_SECONDS,
    RefitClaim,
    claim_refit,
    confirm_refit_claim,
    end_refit_claim,
    find_refit_run,
    finish_refit_run,
)
from models_store.versions import add_version, require_version
from service.errors import InvalidInputError, RiskfitError, SpecError
from service.fit_summaries import odds_ratio_warnings
from service.fitting import reference_distributions_and_ranges
from service.refitting.data import RefitData, load_refit_data, require_counts
from service.refitting.decide import Decision, decide, gate_config
from service.refitting.lease import LeaseKeeper, lost_lock_error
from service.schemas import VersionSpec
from service.schemas.refits import RefitCreate
from service.scoring import LoadedVersion, VersionCache, resolve_version
from service.version_answer import version_answer
from service.version_store import json_finite, require_finite_fit

__all__ = ["request_fingerprint", "run_refit"]

log = logging.getLogger("riskfit.refitting")


def request_fingerprint(request: RefitCreate) -> str:
    """SHA-256 of the request's canonical JSON, ``dry_run`` left out."""
    body = request.model_dump(mode="json", exclude={"dry_run"})
    return hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()


def _run_key(request_fp: str, data_fp: str) -> str:
    return hashlib.sha256(f"refit/1\n{request_fp}\n{data_fp}".encode()).hexdigest()


def _refuse(request: RefitCreate, v: LoadedVersion | None = None) -> None:
    if request.pool_training_data:
        raise InvalidInputError(
            "pool_training_data is not possible: the store keeps no training rows (a version "
            "keeps its data fingerprint, training ranges and reference distributions only)",
            field="pool_training_data",
            value=True,
            remedy="send false (the default) and widen the window, or fit a new version on "
            "the pooled data with POST /risk-models/{model}/versions",
        )
    if v is not None and v.offset:
        raise SpecError(
            f"champion version {v.number} was fitted with the offset column {v.offset!r}; "
            "refits of offset models are not supported",
            field="model",
            value=v.offset,
            remedy="fit a new version on fresh data with POST /risk-models/{model}/versions",
        )


def _iso(at: datetime | None) -> str | None:
    return None if at is None else at.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _data_dict(data: RefitData, holdout_fraction: float) -> dict[str, Any]:
    def part(d: dict[str, Any]) -> dict[str, Any]:
        return {k: _iso(x) if isinstance(x, datetime) else x for k, x in d.items()}

    return {
        "window": {k: _iso(x) if isinstance(x, datetime) else x for k, x in data.window.items()},
        "n_obs": data.n_obs,
        "n_events": data.n_events,
        "holdout_fraction": holdout_fraction,
        "split": "time-ordered: the holdout is the most recently scored part",
        "development": part(data.development.describe()),
        "holdout": part(data.holdout.describe()),
        "scored_by_versions": data.scored_by_versions,
        "data_fingerprint": data.fingerprint,
        "pooled_with_training_data": False,
    }


def _prepare(
    session: Session, model: RiskModel, request: RefitCreate, cache: VersionCache
) -> tuple[LoadedVersion, RefitData]:
    number = resolve_version(session, model, None)
    v = cache.get(session, model, number)
    _refuse(request, v)
    data = load_refit_data(
        session=session,
        model=model,
        champion=v,
        since=request.since,
        until=request.until,
        last_n=request.last_n,
        holdout_fraction=request.holdout_fraction,
    )
    cfg = gate_config(request)
    require_counts(data, min_outcomes=cfg.min_outcomes, min_events=cfg.min_events)
    return v, data


def _store_version(
    session: Session,
    model: RiskModel,
    parent: ModelVersion,
    decision: Decision,
    data: RefitData,
    origin_details: dict[str, Any],
    note: str,
    key_id: int | None,
) -> ModelVersion:
    c = decision.challenger
    assert c is not None
    dev = data.development
    ranges, refs = parent.training_ranges, parent.reference_distributions
    if c.method == "refit":  # the feature effects now come from the new data
        spec = {k: x for k, x in parent.spec.items() if k in VersionSpec.model_fields}
        parent_spec = VersionSpec.model_validate(spec)
        refs, ranges = reference_distributions_and_ranges(parent_spec, dev.columns)
    require_finite_fit(c.coef, c.cov, parent.term_names)
    table = json_finite(c.term_table)
    return add_version(
        session=session,
        model=model,
        spec=parent.spec,
        encoding=parent.encoding,
        term_names=list(parent.term_names),
        coef=[float(x) for x in c.coef],
        cov=np.asarray(c.cov, dtype=float).tolist(),
        fit_stats=json_finite(c.fit_stats),
        term_table=table,
        method="mle",
        options={
            **parent.options,
            "warnings": [*c.fit.warnings, *odds_ratio_warnings(table)],
        },
        training_ranges=json_finite(ranges),
        reference_distributions=json_finite(refs),
        data_fingerprint=data.fingerprint,
        n_obs=dev.n_obs,
        n_events=float(dev.n_events),
        parent_number=parent.number,
        origin=c.method,
        origin_details=origin_details,
        note=note,
        created_by_key_id=key_id,
    )


def _evaluate(
    model: RiskModel, request: RefitCreate, v: LoadedVersion, data: RefitData, level: float
) -> tuple[LoadedVersion, RefitData, Decision, dict[str, Any]]:
    decision = decide(request, data, v, level)
    answer: dict[str, Any] = {
        "model": model.name,
        "refit_id": None,
        "dry_run": request.dry_run,
        "replayed": False,
        **decision.body,
        "promoted": False,
        "version_written": False,
        "challenger_version": None,
        "champion_before": v.number,
        "champion_after": v.number,
        "data": _data_dict(data, request.holdout_fraction),
        "request_fingerprint": request_fingerprint(request),
        "decided_at": _iso(datetime.now(UTC)),
    }
    return v, data, decision, answer


def _commit(
    session: Session,
    model: RiskModel,
    request: RefitCreate,
    run_key: str,
    evaluated: tuple[LoadedVersion, RefitData, Decision, dict[str, Any]],
    key_id: int | None,
    claim: RefitClaim,
) -> dict[str, Any]:
    v, data, decision, answer = evaluated
    if not confirm_refit_claim(session=session, claim=claim):  # first write: the lock row
        raise lost_lock_error(claim)
    run = session.get_one(RefitRun, claim.run_id)
    run.request_fingerprint = run_key
    answer["refit_id"] = run.id
    if decision.challenger is None:
        answer["reasons"].append("nothing was written but this refit's record")
    else:
        parent = require_version(session=session, model=model, number=v.number)
        details = {
            "refit_id": run.id,
            "decision": answer["decision"],
            "reasons": answer["reasons"],
            "data": answer["data"],
            "closed_test": answer["closed_test"],
            "gates": answer["gates"],
            "request_fingerprint": answer["request_fingerprint"],
        }
        version = _store_version(
            session, model, parent, decision, data, details, request.note or "", key_id
        )
        answer.update(version_written=True, challenger_version=version.number)
        if decision.promote:
            reason = f"refit {run.id}: " + answer["reasons"][-1]
            set_champion(
                session=session, model=model, number=version.number, reason=reason, key_id=key_id
            )
            answer.update(promoted=True, champion_after=version.number)
        session.flush()
        version_answer(session, model, version)  # raises (run_refit rolls back) if unreadable
    finish_refit_run(session=session, run=run, status="succeeded", result=answer)
    session.commit()
    return answer


def _locked_refit(
    session: Session,
    model: RiskModel,
    request: RefitCreate,
    cache: VersionCache,
    confidence_level: float,
    key_id: int | None,
    keeper: LeaseKeeper,
) -> tuple[dict[str, Any], bool]:
    """The refit under the lock; returns the answer and whether it replays an earlier run."""
    v, data = _prepare(session, model, request, cache)
    run_key = _run_key(request_fingerprint(request), data.fingerprint)
    earlier = find_refit_run(session=session, model=model, request_fingerprint=run_key)
    if (
        earlier is not None
        and earlier.status == "succeeded"
        and earlier.result.get("champion_after") == v.number
    ):
        return {**earlier.result, "replayed": True}, True
    keeper.check()
    evaluated = _evaluate(model, request, v, data, confidence_level)
    keeper.check()
    return _commit(session, model, request, run_key, evaluated, key_id, keeper.claim), False


def run_refit(
    *,
    session: Session,
    engine: Engine,
    model: RiskModel,
    request: RefitCreate,
    cache: VersionCache,
    confidence_level: float,
    key_id: int | None = None,
    lease_seconds: float = DEFAULT_LOCK_TTL_SECONDS,
) -> dict[str, Any]:
    """Refit ``model`` as ``request`` says; returns the JSON-ready decision (module docstring).

    Raises :class:`RefitInProgressError` (409) while another refit of the model runs (or when
    this one lost its lock before storing), :class:`NotEnoughOutcomesError` (422, with counts),
    :class:`InvalidInputError` (422).
    """
    _refuse(request)
    if request.dry_run:
        v, data = _prepare(session, model, request, cache)
        return _evaluate(model, request, v, data, confidence_level)[3]
    model_id = model.id
    session.rollback()  # end the read transaction: the claim takes its own (models_store.refits)
    claim = claim_refit(
        engine=engine,
        model_id=model_id,
        request_fingerprint=request_fingerprint(request),
        key_id=key_id,
        lease_seconds=lease_seconds,
    )
    error: dict[str, Any] | None = None
    replayed = False
    try:
        with LeaseKeeper(engine, claim) as keeper:
            model = session.get_one(RiskModel, model_id)
            answer, replayed = _locked_refit(
                session, model, request, cache, confidence_level, key_id, keeper
            )
            return answer
    except RiskfitError as exc:
        error = exc.to_dict()
        raise
    finally:
        session.rollback()  # before the claim's own transaction ends it (SQLite write lock)
        _end_claim(engine, claim, error, replayed)


def _end_claim(
    engine: Engine, claim: RefitClaim, error: dict[str, Any] | None, replayed: bool
) -> None:
    """Release the lock and close the run; a failure here only logs (the lease then runs out
    and the next refit records the run as interrupted), so it never hides the answer."""
    try:
        end_refit_claim(engine=engine, claim=claim, error=error, discard_run=replayed)
    except Exception:
        log.exception(
            "refit %s of model %s: releasing the lock failed", claim.run_id, claim.model_id
        )
