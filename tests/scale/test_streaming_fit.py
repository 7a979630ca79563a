"""Streaming fits over Parquet and CSV equal the in-memory fit to the convergence tolerance.

The in-memory engine is itself checked against statsmodels' GLM in tests/stats; here the
streamed fit must equal it (coef, cov, loglik), and on a mid-size streamed file it is also
compared with statsmodels directly (statsmodels.api.GLM, Binomial family, freq_weights and
offset).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa
import pytest
import statsmodels.api as sm

from service.errors import DataError, MissingFeatureError
from service.fitting import reference_distributions_and_ranges
from service.schemas import VersionSpec
from service.sources.blocks import file_blocks
from service.sources.encoding import learn_streamed
from service.sources.tables import TableSpec, chunks
from service.stats.fit import fit_logistic_blocks
from tests.scale._compare import assert_same_fit, fit_in_memory, in_memory
from tests.scale._data import LOG_SPLINE, SPEC_FEATURES, write_parquet
from tests.scale.conftest import BLOCK_ROWS

FEATURES = [*SPEC_FEATURES, LOG_SPLINE]


def _streamed(path: Path, weights: str | None, offset: str | None):  # type: ignore[no-untyped-def]
    kinds = {f["name"]: f["kind"] for f in FEATURES}
    spec = TableSpec(str(path), kinds, "outcome", weights, offset)
    return learn_streamed(FEATURES, lambda: chunks(spec, BLOCK_ROWS))


@pytest.mark.parametrize("which", ["parquet", "directory"])
def test_encoding_references_ranges_identical(
    files: dict[str, Path], table: pa.Table, which: str
) -> None:
    se = _streamed(files[which], None, None)
    data = in_memory(table, FEATURES, None, None)
    enc, _, _ = fit_in_memory(data, FEATURES)
    assert se.encoding.to_dict() == enc.to_dict()  # levels, knots, ranges: exactly equal
    refs, ranges = reference_distributions_and_ranges(VersionSpec(features=FEATURES), data.columns)
    assert se.references == refs
    assert se.ranges == ranges
    assert se.n_obs == table.num_rows
    assert se.passes <= 4


@pytest.mark.parametrize(
    ("which", "method", "weights", "offset"),
    [
        ("parquet", "mle", "exposure", "log_length"),
        ("directory", "mle", None, None),
        pytest.param("parquet", "firth", "exposure", None, marks=pytest.mark.slow),
        ("csv", "mle", "exposure", "log_length"),
        ("csv", "firth", None, "log_length"),
    ],
)
def test_streamed_fit_equals_in_memory(
    files: dict[str, Path],
    table: pa.Table,
    which: str,
    method: str,
    weights: str | None,
    offset: str | None,
) -> None:
    rows = table if which != "csv" else table.slice(0, 30_000)
    data = in_memory(rows, FEATURES, weights, offset)
    enc, _, expected = fit_in_memory(data, FEATURES, method)
    se = _streamed(files[which], weights, offset)
    assert se.encoding.to_dict() == enc.to_dict()
    blocks = file_blocks(str(files[which]), se.encoding, "outcome", weights, offset, BLOCK_ROWS)
    got = fit_logistic_blocks(
        blocks, n_terms=len(enc.term_names), term_names=enc.term_names, method=method
    )
    assert got.converged
    # The in-memory fit takes rounded and several chord steps (cheap there), the streamed one
    # neither (each pass is a read of the file), so they reach the maximum along different
    # paths; both stop at the same convergence test (largest step <= 1e-8 of |coef| + SE).
    assert_same_fit(expected, got, tol=1e-8)


def test_streamed_fit_matches_statsmodels(files: dict[str, Path]) -> None:
    """statsmodels GLM (Binomial, freq_weights, offset) on the design of a 30,000-row file."""
    se = _streamed(files["small"], "exposure", "log_length")
    blocks = file_blocks(str(files["small"]), se.encoding, "outcome", "exposure", "log_length")
    got = fit_logistic_blocks(
        blocks, n_terms=len(se.encoding.term_names), term_names=se.encoding.term_names
    )
    parts = list(blocks())
    X = np.vstack([b.X for b in parts])
    y, w, off = (np.concatenate([getattr(b, k) for b in parts]) for k in ("y", "weights", "offset"))
    ref = sm.GLM(y, X, family=sm.families.Binomial(), freq_weights=w, offset=off).fit(tol=1e-13)
    np.testing.assert_allclose(got.coef, ref.params, rtol=1e-8, atol=1e-9)
    np.testing.assert_allclose(got.std_error, ref.bse, rtol=1e-7)
    assert abs(got.loglik - ref.llf) <= 1e-8 * abs(ref.llf)


def test_bad_cell_is_named_by_its_global_row(tmp_path: Path, table: pa.Table) -> None:
    ages = table.column("age_years").to_numpy().copy()
    ages[123_457] = np.nan
    bad = table.set_column(0, "age_years", pa.array(ages))
    path = write_parquet(bad, tmp_path / "bad.parquet", 10_000)
    with pytest.raises(DataError) as info:
        _streamed(path, None, None)
    assert info.value.field == "data.path[123457].age_years"


def test_missing_column_is_named(files: dict[str, Path]) -> None:
    kinds = {"nope": "numeric"}
    spec = TableSpec(str(files["parquet"]), kinds, "outcome")
    with pytest.raises(MissingFeatureError, match="nope"):
        learn_streamed([{"name": "nope", "kind": "numeric"}], lambda: chunks(spec, BLOCK_ROWS))
