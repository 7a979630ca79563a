"""``riskfit score --records file.csv`` against a live server (issue 16.12).

A CSV column that is not a feature (here the caller's own ``segment_ref``) is no longer
dropped silently: the server refuses it and the command says in one line on stderr which
columns and what to do; ``--passthrough segment_ref`` sends it in each record's passthrough
object and the answer echoes it beside the score, while ``key`` stays the record's key.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import httpx

from service.config import Settings
from tests.api._data import NEW_RECORDS, fit_body
from tests.cli.test_refit_cli import riskfit
from tests.demo._live import live_server

MODEL = "mains"


def _csv(path: Path) -> Path:
    names = ["key", *NEW_RECORDS[0], "segment_ref"]
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(names)
        for i, rec in enumerate(NEW_RECORDS[:3]):
            w.writerow([f"k-{i}", *rec.values(), f"ref {i}"])
    return path


def test_csv_extra_column_refused_with_a_hint_or_passed_through(tmp_path: Path) -> None:
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'cli.db'}", auth_required=False)
    data = _csv(tmp_path / "new.csv")
    with live_server(settings) as url:
        with httpx.Client(base_url=url, timeout=60) as c:
            assert c.post(f"/risk-models/{MODEL}/versions", json=fit_body()).status_code == 201
        common = ["score", "--records", str(data), "--model", MODEL, "--url", url]
        refused = riskfit(*common, key=None)
        assert refused.returncode == 1, refused.stdout
        hint = [line for line in refused.stderr.splitlines() if line.startswith("riskfit score")]
        assert len(hint) == 1 and "segment_ref" in hint[0] and "--passthrough" in hint[0]
        assert json.loads(refused.stdout)["error"]["field"] == "records[0].segment_ref"
        done = riskfit(*common, "--passthrough", "segment_ref", key=None)
        assert done.returncode == 0, done.stdout + done.stderr
        scores = json.loads(done.stdout)["scores"]
        assert [s["key"] for s in scores] == ["k-0", "k-1", "k-2"]
        assert [s["passthrough"] for s in scores] == [{"segment_ref": f"ref {i}"} for i in range(3)]
        missing = riskfit(*common, "--passthrough", "nope", key=None)
        assert missing.returncode == 1 and "nope" in missing.stderr
