"""Small uploads that decode to a great deal are refused from the file's footer or header,
before decoding, with a 422 naming the limit and its setting; a legitimate file still fits.

The memory of a refused upload is measured in a fresh process (tests/security/_memory_probe.py:
growth of ru_maxrss and of pyarrow's pool peak over one request, after a warm-up fit).
Bounds: 48 MB resident and 16 MB Arrow, against the hundreds of MB the files decode to.
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq
import pytest
import statsmodels.api as sm

from service.app import create_app
from service.config import Settings
from tests.api._data import SPEC, segments
from tests.api.conftest import ApiClient, store_dump
from tests.store.dbfixtures import sqlite_url

ROOT = Path(__file__).resolve().parents[2]
TINY_SPEC = {"features": [{"name": "x", "kind": "numeric"}], "outcome": "y"}


def _probe(spec: dict[str, Any], path: Path, settings: dict[str, Any] | None = None) -> Any:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    args = [sys.executable, "-m", "tests.security._memory_probe", json.dumps(spec), str(path)]
    if settings:
        args.append(json.dumps(settings))
    out = subprocess.run(args, cwd=ROOT, env=env, capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr[-3000:]
    result = json.loads(out.stdout.strip().splitlines()[-1])
    figures = {k: v for k, v in result.items() if k != "error"}
    print("memory probe:", path.name, figures)  # the figures, shown with pytest -s
    return result


def _many_rows(path: Path, rows: int) -> Path:
    """``x`` (float64) and ``y`` (int64) zeros: 16 bytes a row decoded, a few bytes stored."""
    block = pa.table({"x": np.zeros(1_000_000), "y": np.zeros(1_000_000, dtype=np.int64)})
    with pq.ParquetWriter(path, block.schema, compression="zstd") as w:
        for _ in range(rows // 1_000_000):
            w.write_table(block, row_group_size=1_000_000)
    return path


def test_many_rows_are_refused_from_the_footer(tmp_path: Path) -> None:
    path = _many_rows(tmp_path / "rows.parquet", 25_000_000)  # 400 MB decoded
    out = _probe(TINY_SPEC, path)  # default settings: max_fit_rows 20,000,000
    assert out["file_kb"] < 2048
    assert out["status"] == 422, out
    err = out["error"]
    assert err["field"] == "data" and err["value"] == 25_000_000
    assert err["details"]["setting"] == "max_fit_rows" and "RISKFIT_MAX_FIT_ROWS" in err["remedy"]
    assert out["rss_extra_mb"] < 48 and out["arrow_extra_mb"] < 16, out


def test_a_repeated_long_text_in_a_numeric_column_is_not_decoded_per_row(
    tmp_path: Path,
) -> None:
    """20,000 rows of one 20,000-character text, stored once in a Parquet dictionary (and the
    Arrow schema not stored, so a plain read would decode 400 MB of text)."""
    long = pa.array(["9" * 19_999 + "x"])
    x = pa.DictionaryArray.from_arrays(pa.array(np.zeros(20_000, dtype=np.int32)), long)
    y = pa.array(np.zeros(20_000, dtype=np.int64))
    path = tmp_path / "text.parquet"
    pq.write_table(pa.table({"x": x, "y": y}), path, store_schema=False, compression="zstd")
    out = _probe(TINY_SPEC, path)
    assert out["status"] == 422, out
    assert out["error"]["field"] == "data.columns.x[0]" and out["error"]["remedy"]
    assert out["rss_extra_mb"] < 48 and out["arrow_extra_mb"] < 16, out


@pytest.fixture
def small_limits(tmp_path: Path) -> Iterator[ApiClient]:
    settings = Settings(
        database_url=sqlite_url(tmp_path),
        auth_required=False,
        max_decoded_mb=8,
        max_file_columns=40,
    )
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()


def _upload(api: ApiClient, spec: dict[str, Any], name: str, content: bytes) -> Any:
    before = store_dump(api)
    r = api.post(
        "/risk-models/m/versions",
        data={"spec": json.dumps(spec)},
        files={"data": (name, content, "application/octet-stream")},
    )
    if r.status_code != 201:
        assert store_dump(api) == before  # nothing stored
    return r


def test_decoded_size_over_the_budget_is_refused(small_limits: ApiClient, tmp_path: Path) -> None:
    content = _many_rows(tmp_path / "rows.parquet", 2_000_000).read_bytes()  # 32 MB decoded
    r = _upload(small_limits, TINY_SPEC, "rows.parquet", content)
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] == "data" and err["details"] == {"limit": 8, "setting": "max_decoded_mb"}
    assert "RISKFIT_MAX_DECODED_MB" in err["remedy"]


def test_a_csv_wider_than_the_column_limit_is_refused_before_parsing(
    small_limits: ApiClient,
) -> None:
    cols = segments(300, seed=8)
    cols.update({f"extra_{j}": [0.0] * 300 for j in range(40)})
    buf = io.BytesIO()
    pa_csv.write_csv(pa.table(cols), buf)
    r = _upload(small_limits, SPEC, "wide.csv", buf.getvalue())
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["value"] == 46 and err["details"]["setting"] == "max_file_columns"


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_a_legitimate_file_still_fits_under_the_same_limits(
    small_limits: ApiClient, fmt: str
) -> None:
    cols = segments(1500, seed=9)
    cols["unused_notes"] = ["n" * 200] * 1500  # a column the spec does not name: not decoded
    table = pa.table(cols)
    buf = io.BytesIO()
    if fmt == "parquet":
        pq.write_table(table, buf, row_group_size=400)
    else:
        pa_csv.write_csv(table, buf)
    r = _upload(small_limits, SPEC, f"ok.{fmt}", buf.getvalue())
    assert r.status_code == 201, r.text
    # reference: statsmodels Logit on the same treatment-coded design (independent solver)
    df = table.to_pandas()
    x = df[["age_years"]].assign(log_d=np.log(df["diameter_mm"]))
    for m in ["asbestos cement", "cast iron", "ductile iron"]:  # PVC is the reference
        x[m] = (df["material"] == m).astype(float)
    for s in ["high", "moderate"]:  # low is the reference
        x[s] = (df["soil"] == s).astype(float)
    x["prior"] = df["prior_breaks_5y"]
    res = sm.Logit(df["outcome"].to_numpy(), sm.add_constant(x.to_numpy(float))).fit(
        method="newton", disp=0, tol=1e-12, maxiter=100
    )
    estimates = [t["estimate"] for t in r.json()["term_table"]["terms"]]
    np.testing.assert_allclose(estimates, res.params, rtol=1e-6, atol=1e-6)
