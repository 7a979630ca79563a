"""Thread settings for numerical work: create_app applies RISKFIT_FIT_THREADS / _BLAS_THREADS."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from threadpoolctl import threadpool_info, threadpool_limits

from service.app import create_app
from service.config import Settings
from service.stats import lanes


@pytest.fixture
def restore_threads() -> Iterator[None]:
    before = lanes.pass_threads()
    with threadpool_limits(limits=None):  # put BLAS back as it was after the test
        yield
    lanes.set_pass_threads(before)


def _blas_threads() -> set[int]:
    return {int(i["num_threads"]) for i in threadpool_info() if i["user_api"] == "blas"}


def test_create_app_applies_thread_settings(tmp_path, restore_threads: None) -> None:  # type: ignore[no-untyped-def]
    url = f"sqlite:///{tmp_path / 'riskfit.db'}"
    create_app(Settings(database_url=url, fit_threads=1, blas_threads=1))
    assert lanes.pass_threads() == 1
    assert _blas_threads() == {1}  # every BLAS numpy/scipy load (OpenBLAS here) is held to 1
    create_app(Settings(database_url=url, fit_threads=2, blas_threads=2))
    assert lanes.pass_threads() == 2
    assert _blas_threads() == {2}


@pytest.mark.parametrize(
    "field,value", [("fit_threads", 3), ("fit_threads", 0), ("blas_threads", 0)]
)
def test_thread_settings_are_bounded(field: str, value: int) -> None:
    with pytest.raises(ValueError, match=field):
        Settings(**{field: value})  # type: ignore[arg-type]
