"""Server-side data paths (``data.path``, setting fit_data_dirs): every file the reader opens
is inside an allowed directory, errors never quote a file nor show an absolute server path,
and a path a client mangles is a 4xx naming ``data.path``.

The data are the invented segments of tests/api/_data.py; a fit that must succeed is checked
against statsmodels (``Logit`` on the same design, independent solver) so that the files read
are exactly the allowed ones.
"""

from __future__ import annotations

import json
import os
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

SECRET = "topsecret_header_9f3a"  # a column name no error may ever show


@pytest.fixture
def allowed(tmp_path: Path) -> Path:
    root = tmp_path / "allowed"
    (root / "parts" / "a" / "b").mkdir(parents=True)
    (root / "csvs" / "a" / "b").mkdir(parents=True)
    table = pa.table(segments(600, seed=31))
    pq.write_table(table.slice(0, 300), root / "parts" / "one.parquet")
    pq.write_table(table.slice(300), root / "parts" / "a" / "b" / "two.parquet")
    pa_csv.write_csv(table.slice(0, 300), root / "csvs" / "one.csv")
    pa_csv.write_csv(table.slice(300), root / "csvs" / "a" / "b" / "two.csv")
    return root


@pytest.fixture
def outside(tmp_path: Path) -> dict[str, Path]:
    """Files outside the allowed directory: same columns (so a leak would fit) plus SECRET."""
    d = tmp_path / "private"
    d.mkdir()
    cols = segments(400, seed=32)
    cols[SECRET] = [1.0] * 400
    pq.write_table(pa.table(cols), d / "secret.parquet")
    pa_csv.write_csv(pa.table(cols), d / "secret.csv")
    return {"parquet": d / "secret.parquet", "csv": d / "secret.csv", "dir": d}


@pytest.fixture
def api(tmp_path: Path, allowed: Path) -> Iterator[ApiClient]:
    settings = Settings(
        database_url=sqlite_url(tmp_path), auth_required=False, fit_data_dirs=[str(allowed)]
    )
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()


def _fit(api: ApiClient, path: str, model: str = "m") -> Any:
    return api.post(f"/risk-models/{model}/versions", json={**SPEC, "data": {"path": path}})


def _refused(api: ApiClient, path: str, status: int, tmp_path: Path) -> dict[str, Any]:
    before = store_dump(api)
    r = _fit(api, path)
    assert r.status_code == status, r.text
    assert store_dump(api) == before  # nothing stored
    text = r.text
    assert SECRET not in text  # no outside file was read, nothing of a file is quoted
    assert str(tmp_path / "private") not in text  # never a link's target
    err: dict[str, Any] = r.json()["error"]
    assert err["field"] == "data.path"
    return err


def _statsmodels_coef(table: pa.Table) -> np.ndarray:
    """statsmodels Logit on the same treatment-coded design (levels sorted, reference first)."""
    df = table.to_pandas()
    x = df[["age_years"]].assign(log_d=np.log(df["diameter_mm"]))
    mats = ["asbestos cement", "cast iron", "ductile iron"]  # PVC is the reference
    for m in mats:
        x[f"m_{m}"] = (df["material"] == m).astype(float)
    for s in ["high", "moderate"]:  # low is the reference
        x[f"s_{s}"] = (df["soil"] == s).astype(float)
    x["prior"] = df["prior_breaks_5y"]
    res = sm.Logit(df["outcome"].to_numpy(), sm.add_constant(x.to_numpy(float))).fit(
        method="newton", disp=0, tol=1e-12, maxiter=100
    )
    return np.asarray(res.params)


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_a_link_two_levels_down_leading_out_is_refused(
    api: ApiClient, allowed: Path, outside: dict[str, Path], tmp_path: Path, fmt: str
) -> None:
    top = allowed / ("parts" if fmt == "parquet" else "csvs")
    # before the link: the two allowed files fit, and equal statsmodels on their rows
    ok = _fit(api, str(top), model=f"ok-{fmt}")
    assert ok.status_code == 201, ok.text
    rows = pa.table(segments(600, seed=31))
    estimates = [t["estimate"] for t in ok.json()["term_table"]["terms"]]
    # reference: statsmodels Logit, same rows and coding; tolerance 1e-6 (two solvers)
    np.testing.assert_allclose(estimates, _statsmodels_coef(rows), rtol=1e-6, atol=1e-6)
    os.symlink(outside[fmt], top / "a" / "b" / f"zz.{fmt}")
    err = _refused(api, str(top), 403, tmp_path)
    assert "outside the allowed directories" in err["message"]
    assert f"a/b/zz.{fmt}" in err["message"]  # named relative to the allowed directory
    assert str(allowed) not in json.dumps(err)  # not the absolute allowed directory
    assert "fit_data_dirs" in err["remedy"]


def test_a_linked_directory_leading_out_is_refused(
    api: ApiClient, allowed: Path, outside: dict[str, Path], tmp_path: Path
) -> None:
    os.symlink(outside["dir"], allowed / "parts" / "a" / "more")
    err = _refused(api, str(allowed / "parts"), 403, tmp_path)
    assert "a/more" in err["message"] and str(allowed) not in json.dumps(err)


def test_links_inside_the_allowed_directory_and_cycles_are_followed(
    api: ApiClient, allowed: Path
) -> None:
    alias = allowed / "alias"
    alias.mkdir()
    # read order is the sorted order of the names inside the directory given:
    # parts/a/b/two.parquet before parts/one.parquet, so the links are named to match
    os.symlink(allowed / "parts" / "one.parquet", alias / "b-one.parquet")
    os.symlink(allowed / "parts" / "a" / "b" / "two.parquet", alias / "a-two.parquet")
    os.symlink(alias, alias / "loop")  # a cycle: walked once
    r = _fit(api, str(alias), model="alias")
    assert r.status_code == 201, r.text
    direct = _fit(api, str(allowed / "parts"), model="direct")
    assert r.json()["data_fingerprint"] == direct.json()["data_fingerprint"]


@pytest.mark.parametrize(
    "raw",
    ["parts/one\x00.parquet", "parts/\x00", "parts/a/\x00/b"],
    ids=["nul-in-name", "nul-alone", "nul-in-a-directory"],
)
def test_a_path_the_file_system_cannot_name_is_a_422(
    api: ApiClient, allowed: Path, tmp_path: Path, raw: str
) -> None:
    body = json.dumps({**SPEC, "data": {"path": f"{allowed}/{raw}"}})  # NUL sent as \\u0000
    before = store_dump(api)
    r = api.post(
        "/risk-models/m/versions", content=body, headers={"Content-Type": "application/json"}
    )
    assert r.status_code == 422, r.text
    assert r.json()["error"]["field"] == "data.path"
    assert r.json()["error"]["remedy"]
    assert store_dump(api) == before


def test_errors_show_paths_relative_to_the_allowed_directory(
    api: ApiClient, allowed: Path, tmp_path: Path
) -> None:
    err = _refused(api, str(allowed / "parts" / "nothing.parquet"), 422, tmp_path)
    assert err["value"] == "parts/nothing.parquet" and str(allowed) not in json.dumps(err)
    err = _refused(api, str(tmp_path / "elsewhere.parquet"), 403, tmp_path)
    assert str(allowed) not in json.dumps(err)  # the allowed directories are not listed
    # a CSV whose row is malformed: the error names the row, never the row's text
    bad = allowed / "bad"
    bad.mkdir()
    text = (allowed / "csvs" / "one.csv").read_text().splitlines()
    text.insert(5, f"{SECRET},{SECRET}")
    (bad / "rows.csv").write_text("\n".join(text) + "\n")
    err = _refused(api, str(bad), 422, tmp_path)
    assert "bad" in err["message"] and str(allowed) not in json.dumps(err)
    # a file that is not Parquet at all
    (bad / "rows.csv").rename(bad / "rows.parquet")
    err = _refused(api, str(bad / "rows.parquet"), 422, tmp_path)
    assert "Parquet" in err["message"] and str(allowed) not in json.dumps(err)
    # a missing column: named, without listing the file's columns
    cols = segments(50, seed=3)
    cols[SECRET] = cols.pop("soil")
    pq.write_table(pa.table(cols), bad / "cols.parquet")
    r = _fit(api, str(bad / "cols.parquet"))
    assert r.status_code == 422 and SECRET not in r.text and str(allowed) not in r.text


def test_nfc_and_nfd_spellings_in_server_files_are_one_level(api: ApiClient, allowed: Path) -> None:
    """Unicode canonical equivalence (UAX #15): 'b\\u00e9ton' and 'be\\u0301ton' are one level,
    stored in NFC, as in the JSON fit of the NFC data."""
    cols = segments(900, seed=33)
    nfc = [("b\u00e9ton" if m == "ductile iron" else m) for m in cols["material"]]
    mixed = [("be\u0301ton" if i % 2 else m) if m == "b\u00e9ton" else m for i, m in enumerate(nfc)]
    base = api.post(
        "/risk-models/nfc/versions", json={**SPEC, "data": {"columns": {**cols, "material": nfc}}}
    )
    assert base.status_code == 201, base.text
    d = allowed / "unicode"
    d.mkdir()
    pq.write_table(pa.table({**cols, "material": mixed}), d / "mixed.parquet", row_group_size=200)
    pa_csv.write_csv(pa.table({**cols, "material": mixed}), d / "mixed.csv")
    for name in ("mixed.parquet", "mixed.csv"):
        r = _fit(api, str(d / name), model=name.replace(".", "-"))
        assert r.status_code == 201, r.text
        assert r.json()["encoding"] == base.json()["encoding"], name
        assert r.json()["data_fingerprint"] == base.json()["data_fingerprint"], name
        assert r.json()["training_ranges"] == base.json()["training_ranges"], name


def test_a_server_parquet_row_group_over_the_budget_is_refused_from_its_footer(
    tmp_path: Path, allowed: Path
) -> None:
    """One row group of 100,000 rows x 6 columns decodes to ~4.5 MB (a pass decodes a row
    group at a time); with max_decoded_mb=1 it is refused before any page is read."""
    cols = segments(1000, seed=34)
    big = pa.concat_tables([pa.table(cols)] * 100)
    d = allowed / "big"
    d.mkdir()
    pq.write_table(big, d / "one-group.parquet", row_group_size=len(big), compression="zstd")
    settings = Settings(
        database_url=sqlite_url(tmp_path),
        auth_required=False,
        fit_data_dirs=[str(allowed)],
        max_decoded_mb=1,
    )
    client = ApiClient(create_app(settings))
    try:
        before = store_dump(client)
        r = _fit(client, str(d))
        assert r.status_code == 422, r.text[:500]
        err = r.json()["error"]
        assert err["details"] == {"limit": 1, "setting": "max_decoded_mb"}
        assert "row group" in err["message"] and "RISKFIT_MAX_DECODED_MB" in err["remedy"]
        assert store_dump(client) == before
        # the same rows in row groups of 5,000 (~0.25 MB decoded each) are read
        pq.write_table(big, d / "one-group.parquet", row_group_size=5_000)
        r = _fit(client, str(d / "one-group.parquet"), model="small-groups")
        assert r.status_code == 201, r.text[:500]
    finally:
        client.close()


def test_dask_partitions_are_the_checked_files(allowed: Path, outside: dict[str, Path]) -> None:
    from service.distributed import file_partitions
    from service.errors import PermissionDeniedError

    parts = file_partitions(str(allowed / "parts"), {}, "outcome")
    found = sorted(Path(p.path).name for p in parts)
    assert found == ["one.parquet", "two.parquet"]  # nested files too, nothing else
    os.symlink(outside["parquet"], allowed / "parts" / "a" / "b" / "zz.parquet")
    with pytest.raises(PermissionDeniedError):
        file_partitions(str(allowed / "parts"), {}, "outcome")


def test_a_server_csv_wider_than_the_column_limit_is_refused(tmp_path: Path, allowed: Path) -> None:
    cols = segments(300, seed=35)
    cols.update({f"extra_{j}": [0.0] * 300 for j in range(40)})
    pa_csv.write_csv(pa.table(cols), allowed / "csvs" / "a" / "wide.csv")
    settings = Settings(
        database_url=sqlite_url(tmp_path),
        auth_required=False,
        fit_data_dirs=[str(allowed)],
        max_file_columns=40,
    )
    client = ApiClient(create_app(settings))
    try:
        r = _fit(client, str(allowed / "csvs"))
        assert r.status_code == 422, r.text[:500]
        err = r.json()["error"]
        assert err["value"] == 46 and err["details"]["setting"] == "max_file_columns"
        assert _fit(client, str(allowed / "csvs" / "one.csv")).status_code == 201
    finally:
        client.close()
