"""Versions: numbered 1, 2, ... per model, never overwritten; champion history."""

from __future__ import annotations

import threading

import pytest
from sqlalchemy import delete, func, select, update
from sqlalchemy.orm import Session, sessionmaker

from models_store import (
    ImmutableVersionError,
    ModelVersion,
    RiskModel,
    add_version,
    champion_history,
    create_model,
    current_champion,
    get_model,
    get_version,
    latest_version,
    list_versions,
    set_champion,
)
from service.errors import ConflictError, InvalidInputError, VersionNotFoundError
from tests.store.dbfixtures import version_fields


def test_versions_are_numbered_per_model(session: Session, model: RiskModel) -> None:
    other = create_model(session=session, name="mains")
    add_version(session=session, model=model, **version_fields(note="second"))
    first_of_other = add_version(session=session, model=other, **version_fields())
    third = add_version(session=session, model=model, **version_fields(parent_number=2))
    session.commit()
    assert [v.number for v in list_versions(session=session, model=model)] == [1, 2, 3]
    assert first_of_other.number == 1
    assert third.number == 3 and third.parent_number == 2
    assert latest_version(session=session, model=model) is third
    assert get_version(session=session, model=model, number=9) is None


def test_stored_version_round_trips(session: Session, model: RiskModel) -> None:
    stored = get_version(session=session, model=model, number=1)
    assert stored is not None
    assert stored.cov == version_fields()["cov"]
    assert stored.origin == "fit" and stored.note == ""
    assert stored.created_at.tzinfo is not None


def test_a_stored_version_cannot_be_overwritten(
    session: Session, factory: sessionmaker[Session], model: RiskModel
) -> None:
    version = get_version(session=session, model=model, number=1)
    assert version is not None
    version.coef = [0.0, 0.0]
    with pytest.raises(ImmutableVersionError):
        session.flush()
    session.rollback()
    with pytest.raises(ImmutableVersionError):
        session.execute(update(ModelVersion).values(note="changed"))
    with pytest.raises(ImmutableVersionError):
        session.execute(delete(ModelVersion))
    session.rollback()  # expires `model` too: look it up again in the fresh session
    with factory() as fresh:
        reloaded = get_model(session=fresh, name="pipes")
        assert reloaded is not None
        (again,) = list_versions(session=fresh, model=reloaded)
        assert again.coef == version_fields()["coef"] and again.note == ""


def test_add_version_refuses_fields_it_owns(session: Session, model: RiskModel) -> None:
    with pytest.raises(TypeError, match="number"):
        add_version(session=session, model=model, **version_fields(number=7))
    with pytest.raises(ValueError, match="origin"):
        add_version(session=session, model=model, **version_fields(origin="manual"))


def test_concurrent_versions_never_share_a_number(
    factory: sessionmaker[Session], model: RiskModel
) -> None:
    """SQLite serialises the writers (both succeed, 2 and 3); PostgreSQL may refuse one with
    ConflictError. Either way no number is stored twice and no version is lost silently."""
    outcomes: list[object] = []
    barrier = threading.Barrier(4)

    def writer() -> None:
        barrier.wait()
        try:
            with factory() as s:
                m = get_model(session=s, name="pipes")
                assert m is not None
                v = add_version(session=s, model=m, **version_fields())
                s.commit()
                outcomes.append(v.number)
        except ConflictError as error:
            outcomes.append(error)

    threads = [threading.Thread(target=writer) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    numbers = sorted(n for n in outcomes if isinstance(n, int))
    assert len(outcomes) == 4 and numbers
    with factory() as s:
        stored = [v.number for v in list_versions(session=s, model=model)]
        assert stored == list(range(1, len(numbers) + 2)) == [1, *numbers]
        count = s.scalar(select(func.count()).select_from(ModelVersion))
        assert count == 1 + len(numbers)


def test_champion_history_is_kept(session: Session, model: RiskModel) -> None:
    assert current_champion(session=session, model=model) is None
    add_version(session=session, model=model, **version_fields())
    set_champion(session=session, model=model, number=1, reason="first version", key_id=None)
    set_champion(session=session, model=model, number=2, reason="better calibrated")
    set_champion(session=session, model=model, number=1, reason=" rollback ")
    session.commit()
    assert current_champion(session=session, model=model) == 1
    history = champion_history(session=session, model=model)
    assert [(c.seq, c.version_number, c.previous_version_number) for c in history] == [
        (1, 1, None),
        (2, 2, 1),
        (3, 1, 2),
    ]
    assert [c.reason for c in history] == ["first version", "better calibrated", "rollback"]
    assert all(c.changed_at.tzinfo is not None for c in history)


def test_champion_needs_an_existing_version_and_a_reason(
    session: Session, model: RiskModel
) -> None:
    with pytest.raises(VersionNotFoundError) as info:
        set_champion(session=session, model=model, number=5, reason="typo")
    assert info.value.field == "version" and info.value.value == 5
    with pytest.raises(InvalidInputError) as empty:
        set_champion(session=session, model=model, number=1, reason="  ")
    assert empty.value.field == "reason"
    assert champion_history(session=session, model=model) == []


def test_model_names_are_unique(session: Session, model: RiskModel) -> None:
    with pytest.raises(ConflictError) as info:
        create_model(session=session, name="pipes")
    assert info.value.field == "name"
