"""Serving one score request: the model and champion from memory, scored, logged, answered.

    cached (model, champion) -> cached decoded version -> score -> commit (champion re-checked
    inside the write transaction) -> answer;  ChampionChangedError -> score again

Nothing here reads the store when the caches hold the model and the version: the only store
work of a request is the score-log commit, done by the group-commit writer thread
(:mod:`service.score_writer`), whose transaction also re-reads the champion. So a request needs
no session, no connection checkout and no store read of its own (see
:mod:`service.version_cache` for why the champion is still never stale). A cache miss (first
request for a model or version, a model without a champion) reads the store in a worker
thread, in a session of its own; so do all errors about models, versions and champions.

Where it runs: a small body (up to :data:`INLINE_MAX_BYTES`, a few records) is scored on the
event loop and awaits its commit without holding a thread (scoring a few records takes well
under a millisecond; a thread hop and the GIL hand-over cost more). Bigger bodies are scored in
a worker thread, so the event loop keeps serving; that thread then builds the answer bytes
while the writer thread inserts the rows, and hands them over only after the commit. Every
batch, whatever its size, is committed by the writer (big ones form a group of their own or
share it up to ``MAX_GROUP_ROWS``); the answer exists only after its rows are committed.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from starlette.concurrency import run_in_threadpool

from models_store.orm import RiskModel
from service.errors import ConflictError
from service.schemas.scores import ScoreOptions
from service.score_input import ScoreInput, columns_input, records_input
from service.score_writer import ChampionChangedError, ScoreLogWriter, writer_of
from service.scoring import (
    ScoredBatch,
    score_prepared,
    score_record,
    scoring_model,
    version_to_score,
)
from service.version_cache import LoadedVersion, VersionCache

__all__ = ["INLINE_MAX_BYTES", "ParsedBody", "serve_scores"]

INLINE_MAX_BYTES = 4096  # a body this small is scored on the event loop (well under 1 ms)
_MAX_TRIES = 8  # champion changes in a row while one request is scored (then 409)

#: (options, data, is_columns): the body as the route parsed it (``data`` still raw JSON).
ParsedBody = tuple[ScoreOptions, Any, bool]


def _read_model(state: Any, name: str) -> tuple[RiskModel, int | None]:
    """The model and its champion from the store (404 if no such model); remembered."""
    with state.session_factory() as session:
        found = scoring_model(session=session, name=name)
    cache: VersionCache = state.version_cache
    cache.remember_model(*found)
    return found


def _read_version(state: Any, model: RiskModel, number: int) -> LoadedVersion:
    """Version ``number`` decoded from the store (404 if none); remembered."""
    cache: VersionCache = state.version_cache
    with state.session_factory() as session:
        return cache.get(session, model, number)


def _log_and_answer(writer: ScoreLogWriter, scored: ScoredBatch) -> bytes:
    """Hand the rows to the writer, build the answer while they are inserted, then wait.

    The answer bytes leave this function only once the rows are committed (``result()``
    raises the request's own error, and then nothing of it was stored).
    """
    done = writer.submit(scored.rows)
    try:
        body = scored.answer_json()  # the writer thread inserts meanwhile (sqlite3 drops the GIL)
    finally:
        done.result()  # durable before the answer exists
    return body


async def serve_scores(
    *, state: Any, name: str, body_bytes: int, parse: Callable[[], ParsedBody]
) -> tuple[int, bytes]:
    """Score the request's records with model ``name``; returns (records, answer JSON bytes).

    ``parse()`` reads the body; it is called after the model is known, so an unknown model
    answers 404 before any complaint about the body. ``body_bytes`` decides where it runs.
    """
    cache: VersionCache = state.version_cache
    known: tuple[RiskModel, int | None] | None = cache.model(name)
    if known is None:
        known = await run_in_threadpool(_read_model, state, name)
    model, champion = known
    options, data, is_columns = parse()
    level = options.confidence_level or state.settings.default_confidence_level
    limit = state.settings.extrapolation_limit
    writer = writer_of(state)
    for _ in range(_MAX_TRIES):
        number = version_to_score(model, options.version, champion)  # 404 without a champion
        v = cache.peek(model.id, number)
        if v is None:
            v = await run_in_threadpool(_read_version, state, model, number)

        def score(v: LoadedVersion = v) -> ScoredBatch:
            claims_champion = options.version is None
            if not is_columns and len(data) == 1:  # the version's compiled one-record path
                one = score_record(
                    model=model,
                    v=v,
                    record=data[0],
                    confidence_level=level,
                    explain=options.explain,
                    checks_champion=claims_champion,
                    extrapolation_limit=limit,
                )
                if one is not None:
                    return one
            batch: ScoreInput = (columns_input if is_columns else records_input)(data, v.inputs)
            return score_prepared(
                model=model,
                v=v,
                batch=batch,
                confidence_level=level,
                explain=options.explain,
                checks_champion=claims_champion,
                extrapolation_limit=limit,
            )

        try:
            if body_bytes <= INLINE_MAX_BYTES:
                scored = score()
                channel = getattr(state, "score_channel", None)
                if channel is not None and channel.takes(scored.rows):
                    await channel.log(scored.rows, writer.submit_async)  # the child logs
                else:
                    await writer.submit_async(scored.rows)  # durable before the answer
                return len(scored.rows.ids), scored.answer_json()
            scored = await run_in_threadpool(score)
            return len(scored.rows.ids), await run_in_threadpool(_log_and_answer, writer, scored)
        except ChampionChangedError as changed:  # nothing was written: score with the new one
            champion = changed.number
    raise ConflictError(
        f"the champion of {name!r} changed {_MAX_TRIES} times while this request was scored",
        field="version",
        value=None,
        remedy="retry the request, or name the version to score with",
    )
