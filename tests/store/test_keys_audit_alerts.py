"""API keys (hash only), the audit log and alerts."""

from __future__ import annotations

from datetime import timedelta

import pytest
from sqlalchemy.orm import Session

from models_store import (
    RiskModel,
    add_alert,
    create_key,
    find_key_by_hash,
    find_open_alert,
    get_key,
    list_alerts,
    list_events,
    list_keys,
    record,
    resolve_alert,
    revoke_key,
    touch_key,
    utcnow,
)
from service.errors import ConflictError, InvalidInputError


def test_keys_are_found_by_hash_until_revoked(session: Session) -> None:
    key = create_key(session=session, name="ci", role="scorer", key_hash="h" * 64, prefix="rk_ab")
    session.commit()
    assert find_key_by_hash(session=session, key_hash="h" * 64) is key
    assert find_key_by_hash(session=session, key_hash="x" * 64) is None
    first = revoke_key(session=session, key_id=key.id)
    assert first is not None and first.revoked_at is not None
    revoked_at = first.revoked_at
    revoke_key(session=session, key_id=key.id, at=utcnow() + timedelta(days=1))
    session.commit()
    assert key.revoked_at == revoked_at  # idempotent
    assert find_key_by_hash(session=session, key_hash="h" * 64) is None
    assert find_key_by_hash(session=session, key_hash="h" * 64, active_only=False) is key
    assert list_keys(session=session, include_revoked=False) == []
    assert revoke_key(session=session, key_id=999) is None


def test_key_roles_and_hashes_are_checked(session: Session) -> None:
    with pytest.raises(InvalidInputError) as info:
        create_key(session=session, name="x", role="root", key_hash="a" * 64, prefix="rk")
    assert info.value.field == "role"
    create_key(session=session, name="a", role="admin", key_hash="a" * 64, prefix="rk")
    with pytest.raises(ConflictError):
        create_key(session=session, name="b", role="admin", key_hash="a" * 64, prefix="rk")
    session.commit()
    assert [k.name for k in list_keys(session=session)] == ["a"]


def test_touch_key_is_rate_limited(session: Session) -> None:
    key = create_key(session=session, name="a", role="modeler", key_hash="b" * 64, prefix="rk")
    now = utcnow()
    assert touch_key(session=session, key=key, at=now)
    assert not touch_key(session=session, key=key, at=now + timedelta(seconds=30))
    assert touch_key(session=session, key=key, at=now + timedelta(seconds=61))
    session.commit()
    stored = get_key(session=session, key_id=key.id)
    assert stored is not None and stored.last_used_at == now + timedelta(seconds=61)


def test_audit_events_filter_and_order(session: Session, model: RiskModel) -> None:
    key = create_key(session=session, name="a", role="admin", key_hash="c" * 64, prefix="rk")
    record(session=session, action="fit", key_id=key.id, model_name="pipes", details={"v": 1})
    record(session=session, action="champion", key_id=key.id, model_name="pipes")
    record(session=session, action="key.create", key_id=None, details={"name": "b"})
    session.commit()
    assert [e.action for e in list_events(session=session)] == ["key.create", "champion", "fit"]
    assert [e.action for e in list_events(session=session, model_name="pipes", limit=1)] == [
        "champion"
    ]
    assert [e.details for e in list_events(session=session, action="fit")] == [{"v": 1}]
    assert len(list_events(session=session, key_id=key.id)) == 2
    assert list_events(session=session, since=utcnow() + timedelta(hours=1)) == []


def test_alerts_open_and_resolve(session: Session, model: RiskModel) -> None:
    a = add_alert(
        session=session,
        model=model,
        measure="calibration_slope",
        value=0.7,
        threshold=0.8,
        direction="below",
        window={"since": "2025-01-01"},
        version_number=1,
    )
    b = add_alert(
        session=session, model=model, measure="o_e", value=1.5, threshold=1.2, direction="above"
    )
    session.commit()
    assert find_open_alert(session=session, model=model, measure="o_e") is b
    resolve_alert(session=session, alert_id=b.id)
    session.commit()
    assert list_alerts(session=session, model=model, open_only=True) == [a]
    assert list_alerts(session=session, model=model) == [b, a]
    assert find_open_alert(session=session, model=model, measure="o_e") is None
    assert resolve_alert(session=session, alert_id=12345) is None
