"""Input drift per feature: PSI of recent inputs against the version's stored reference.

The reference distributions (numeric quantile bins, categorical shares) were stored with the
version at fit time (``model_version.reference_distributions``). The recent inputs are those
of the version's scores from the start of the latest drift window, at most
``psi_max_records`` of them (the oldest of that range first). Missing values (``None``) are
left out and counted in ``n_missing``. Bands at 0.10 and 0.25 are common practice; every
feature reports its counts so the reader can judge the sample size.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np
import orjson
from sqlalchemy import Text, cast, select
from sqlalchemy.orm import Session

from models_store.orm import RiskModel, Score
from models_store.versions import get_version
from service.monitoring._json import jsonable
from service.stats.psi import PSI_MAJOR, PSI_MODERATE, psi, reference_from_dict

__all__ = ["input_drift", "recent_inputs"]


def recent_inputs(
    session: Session, model: RiskModel, version: int, since: datetime | None, limit: int
) -> list[dict[str, Any]]:
    """The ``inputs`` of ``version``'s scores created at or after ``since``, oldest first.

    The same rows as :func:`models_store.scores.score_inputs`, fetched as JSON text through
    the DB-API cursor and parsed with orjson (no per-row ORM or type processing).
    """
    stmt = select(cast(Score.inputs, Text)).where(
        Score.model_id == model.id, Score.version_number == version
    )
    if since is not None:
        stmt = stmt.where(Score.created_at >= since)
    result = session.connection().execute(stmt.order_by(Score.created_at).limit(limit))
    raw = result.cursor.fetchall() if result.cursor is not None else []
    result.close()
    return [orjson.loads(text) for (text,) in raw]


def _values(rows: list[dict[str, Any]], name: str, kind: str) -> tuple[np.ndarray, int]:
    raw = [r.get(name) for r in rows]
    kept = [v for v in raw if v is not None]
    if kind == "numeric":
        arr = np.asarray(kept, dtype=np.float64)
        ok = np.isfinite(arr)
        return arr[ok], len(raw) - int(ok.sum())
    return np.asarray([str(v) for v in kept], dtype=object), len(raw) - len(kept)


def input_drift(
    *,
    session: Session,
    model: RiskModel,
    version: int | None,
    since: datetime | None,
    max_records: int,
) -> dict[str, Any]:
    """PSI per feature of ``version``'s recent inputs (see module docstring)."""
    body: dict[str, Any] = {
        "version": version,
        "since": since,
        "thresholds": {"moderate": PSI_MODERATE, "major": PSI_MAJOR},
        "features": [],
    }
    row = None if version is None else get_version(session=session, model=model, number=version)
    if version is None or row is None:
        body.update(status="no_version", n=0)
        return body
    rows = recent_inputs(session, model, version, since, max_records)
    body["n"] = len(rows)
    for name, ref_dict in (row.reference_distributions or {}).items():
        if not isinstance(ref_dict, dict) or "kind" not in ref_dict:
            continue
        ref = reference_from_dict(ref_dict)
        values, missing = _values(rows, name, ref_dict["kind"])
        item: dict[str, Any] = {"feature": name, "kind": ref_dict["kind"], "n_missing": missing}
        if values.size == 0:
            item.update(status="no_values", n_obs=0, n_reference=ref.n_obs)
        else:
            res = jsonable(psi(ref, values, field=f"inputs.{name}"))
            item.update(status="ok", **res)
        body["features"].append(item)
    body["status"] = "ok" if rows else "no_scores"
    return body
