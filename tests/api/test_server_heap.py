"""The app's lifespan tunes the garbage collector for a server and undoes it at shutdown."""

from __future__ import annotations

import gc
from pathlib import Path

from service.app import create_app
from service.config import Settings
from service.heap import YOUNG_THRESHOLD, server_heap
from tests.api.conftest import ApiClient
from tests.store.dbfixtures import sqlite_url


def test_lifespan_freezes_the_start_up_heap_and_restores_the_collector(tmp_path: Path) -> None:
    before = gc.get_threshold()
    app = create_app(Settings(database_url=sqlite_url(tmp_path), auth_required=False, tune_gc=True))
    client = ApiClient(app)  # runs the lifespan's start-up
    try:
        assert client.get("/healthz").status_code == 200
        assert gc.get_freeze_count() > 0  # start-up objects out of the collector's walks
        assert gc.get_threshold()[0] == max(YOUNG_THRESHOLD, before[0])
        assert gc.get_threshold()[1:] == before[1:]
    finally:
        client.close()  # and its shutdown
    assert gc.get_threshold() == before
    assert gc.get_freeze_count() == 0  # collectable again: a test process starts many apps


def test_without_tune_gc_the_collector_is_left_alone(tmp_path: Path) -> None:
    before = gc.get_threshold()
    app = create_app(
        Settings(database_url=sqlite_url(tmp_path), auth_required=False, tune_gc=False)
    )
    client = ApiClient(app)
    try:
        assert gc.get_freeze_count() == 0 and gc.get_threshold() == before
    finally:
        client.close()


def test_server_heap_restores_the_collector_when_the_block_fails() -> None:
    before = gc.get_threshold()
    try:
        with server_heap():
            raise RuntimeError("start-up failed")
    except RuntimeError:
        pass
    assert gc.get_threshold() == before and gc.get_freeze_count() == 0
