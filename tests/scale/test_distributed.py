"""The Dask engine equals the single-machine engine to 1e-10 (coef, cov, log-likelihoods),
on a LocalCluster of two worker processes on 127.0.0.1; Firth, weights and offsets included.
On data large enough for a sample start the two engines sample different rows, so there they
agree to Newton's convergence tolerance (1e-8).

The single-machine engine is checked against statsmodels' GLM in tests/stats and against the
in-memory fit in test_streaming_fit.py; here the cluster must reproduce it.
"""

from __future__ import annotations

from collections.abc import Iterator
from functools import partial
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.errors import DataError, SeparationError
from service.sources.blocks import file_blocks
from service.sources.encoding import learn_streamed
from service.sources.tables import TableSpec, chunks
from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic, fit_logistic_blocks
from tests.scale._compare import assert_same_fit
from tests.scale._data import SPEC_FEATURES

distributed = pytest.importorskip("dask.distributed")

from service.distributed import DaskEngine, file_partitions, fit_logistic_dask  # noqa: E402


@pytest.fixture(scope="module")
def client() -> Iterator[Any]:
    cluster = distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
    )
    c = distributed.Client(cluster)
    try:
        yield c
    finally:
        c.close()
        cluster.close()


def _arrays(seed: int, n: int, p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=(n, p - 1))])
    off = rng.normal(0.0, 0.3, n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(X @ np.linspace(-1, 0.5, p) + off)))).astype(float)
    w = rng.uniform(0.2, 3.0, n)
    return X, y, w, off


def _array_parts(X: np.ndarray, *cols: np.ndarray | None, k: int = 4) -> list[Any]:
    cuts = np.array_split(np.arange(X.shape[0]), k)
    return [
        partial(array_blocks, X[c], *(None if v is None else v[c] for v in cols), block_rows=500)
        for c in cuts
    ]


@pytest.mark.parametrize(
    ("method", "use_w", "use_off", "persist"),
    [
        ("mle", True, True, True),
        ("firth", True, False, True),
        ("firth", True, True, False),
        ("ridge", False, True, True),
    ],
)
def test_arrays_equal_single_machine(
    client: Any, method: str, use_w: bool, use_off: bool, persist: bool
) -> None:
    X, y, w, off = _arrays(5, 6_000, 6)
    w_, off_ = (w if use_w else None), (off if use_off else None)
    lam = 2.0 if method == "ridge" else 0.0
    local = fit_logistic(X, y, weights=w_, offset=off_, method=method, ridge_lambda=lam)  # type: ignore[arg-type]
    engine = DaskEngine(client, _array_parts(X, y, w_, off_), persist=persist)
    got = fit_logistic_dask(engine, n_terms=6, method=method, ridge_lambda=lam)  # type: ignore[arg-type]
    assert got.converged
    assert_same_fit(local, got)
    assert got.null_penalized_loglik == pytest.approx(local.null_penalized_loglik, rel=1e-10)


@pytest.mark.slow  # > 20 s on a loaded 2-core machine
def test_parquet_directory_equal_single_machine(
    client: Any, files: dict[str, Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    import service.distributed as dist

    starts: list[np.ndarray | None] = []
    real_start = dist.start_for

    def recorded(*args: Any) -> np.ndarray | None:
        starts.append(real_start(*args))
        return starts[-1]

    monkeypatch.setattr(dist, "start_for", recorded)
    kinds = {f["name"]: f["kind"] for f in SPEC_FEATURES}
    spec = TableSpec(str(files["directory"]), kinds, "outcome", "exposure", "log_length")
    enc = learn_streamed(SPEC_FEATURES, lambda: chunks(spec, 16_384)).encoding
    args = ("outcome", "exposure", "log_length")
    local = fit_logistic_blocks(
        file_blocks(str(files["directory"]), enc, *args, batch_rows=16_384),
        n_terms=len(enc.term_names),
        term_names=enc.term_names,
    )
    parts = file_partitions(
        str(files["directory"]), enc.to_dict(), "outcome", weights="exposure", offset="log_length"
    )
    assert len(parts) == 5
    got = fit_logistic_dask(
        DaskEngine(client, parts), n_terms=len(enc.term_names), term_names=enc.term_names
    )
    # Both engines start Newton from a fit on a sample of the rows (this data is large enough),
    # but not on the same rows: the local one samples the whole file, the cluster one each
    # partition. Both stop at the same convergence test (largest step <= 1e-8 of |coef| + SE),
    # so they agree to that tolerance, not to the last bits.
    assert_same_fit(local, got, tol=1e-8)
    assert len(starts) == 1 and starts[0] is not None  # the cluster fit started from its sample


def test_separation_detected_on_the_cluster(client: Any) -> None:
    rng = np.random.default_rng(9)
    x = rng.normal(size=400)
    X = np.column_stack([np.ones(400), x, rng.normal(size=400)])
    y = (x > 0).astype(float)
    with pytest.raises(SeparationError) as info:
        fit_logistic_dask(DaskEngine(client, _array_parts(X, y, None, None)), n_terms=3)
    assert "x1" in info.value.details["terms"]


def test_bad_weights_raise_the_engine_error(client: Any) -> None:
    X, y, w, _ = _arrays(6, 1_000, 3)
    w[700] = -1.0
    with pytest.raises(DataError, match="negative weight"):
        fit_logistic_dask(DaskEngine(client, _array_parts(X, y, w, None)), n_terms=3)


@pytest.mark.parametrize("method", ["mle", "firth"])
def test_shifted_column_and_firth_null_equal_single_machine(client: Any, method: str) -> None:
    # A column near 1e6 (centred on the workers, as locally) and Firth's null model under the
    # full model's penalty: the cluster reproduces the single-machine fit, which is checked
    # against statsmodels / scipy in tests/stats/test_location_invariance.py and
    # tests/stats/test_firth_global_and_drop_rules.py.
    X, y, w, off = _arrays(61, 3000, 4)
    X[:, 2] += 1e6
    local = fit_logistic(X, y, weights=w, offset=off, method=method)  # type: ignore[arg-type]
    engine = DaskEngine(client, _array_parts(X, y, w, off))
    got = fit_logistic_dask(engine, n_terms=4, method=method)  # type: ignore[arg-type]
    assert got.converged and local.converged
    np.testing.assert_allclose(got.coef, local.coef, rtol=1e-9)
    np.testing.assert_allclose(got.std_error, local.std_error, rtol=1e-8)
    assert got.null_penalized_loglik == pytest.approx(local.null_penalized_loglik, rel=1e-10)
