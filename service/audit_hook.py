"""The audit hook: version, champion and refit changes recorded with the acting key.

:func:`install_audit` hooks a session; before each flush the new or changed rows of
``model_version``, ``champion_change`` and ``refit_run`` add ``audit_event`` rows to the same
transaction, so an audited change and its audit row commit (or roll back) together.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import event, inspect
from sqlalchemy.orm import Session

from models_store.orm import AuditEvent, ChampionChange, ModelVersion, RefitRun, RiskModel

__all__ = ["install_audit"]

_AUDIT_FLAG = "riskfit_audit_key_id"


def install_audit(session: Session, *, key_id: int | None) -> None:
    """Record version, champion and refit changes made through ``session`` as ``key_id``."""
    first = _AUDIT_FLAG not in session.info
    session.info[_AUDIT_FLAG] = key_id
    if first:
        event.listen(session, "before_flush", _audit_before_flush)


def _model_name(session: Session, model_id: int) -> str | None:
    with session.no_autoflush:
        model = session.get(RiskModel, model_id)
    return None if model is None else model.name


def _audit_before_flush(session: Session, _context: Any, _instances: Any) -> None:
    key_id = session.info.get(_AUDIT_FLAG)
    events: list[tuple[str, int, dict[str, Any]]] = []
    for obj in list(session.new):
        if isinstance(obj, ModelVersion):
            details = {"number": obj.number, "origin": obj.origin, "method": obj.method}
            events.append(("version.create", obj.model_id, details))
        elif isinstance(obj, ChampionChange):
            details = {
                "version": obj.version_number,
                "previous_version": obj.previous_version_number,
                "reason": obj.reason,
            }
            events.append(("champion.change", obj.model_id, details))
        elif isinstance(obj, RefitRun):
            events.append(("refit.start", obj.model_id, {"status": obj.status}))
    for obj in list(session.dirty):
        if isinstance(obj, RefitRun):
            history = inspect(obj).attrs.status.history
            if history.has_changes():
                details = {"refit_run_id": obj.id, "status": obj.status}
                events.append(("refit.finish", obj.model_id, details))
    for action, model_id, details in events:
        name = _model_name(session, model_id) if model_id is not None else None
        _add_event(session, action=action, key_id=key_id, model_name=name, details=details)


def _add_event(
    session: Session, *, action: str, key_id: int | None, model_name: str | None, details: Any
) -> None:
    """Add an audit row to the flush in progress (``record`` itself flushes, so not here)."""
    session.add(AuditEvent(action=action, key_id=key_id, model_name=model_name, details=details))
