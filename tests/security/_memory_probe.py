"""Run one multipart fit in a fresh process and print what it cost (JSON on stdout).

    python -m tests.security._memory_probe SPEC_JSON FILE [SETTINGS_JSON]

A small legitimate upload is fitted first (imports and lazy set-up out of the way), then the
file is uploaded. Printed: the status, the error, and the extra peak memory of the second
request: ``rss_extra_mb`` (growth of the process's high-water resident set, ru_maxrss) and
``arrow_extra_mb`` (growth of the peak of pyarrow's default memory pool). ``rss_extra_mb`` is
the peak resident set during the request minus the resident set just before it: the peak is
reset before the request (``/proc/self/clear_refs``: 5, Linux) and read after it (``VmHWM``);
where the reset is refused, the high-water mark since the start stands in (an upper bound).
"""

from __future__ import annotations

import contextlib
import io
import json
import sys
import tempfile
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from service.app import create_app
from service.config import Settings
from tests.api._data import SPEC, segments
from tests.api.conftest import ApiClient
from tests.store.dbfixtures import sqlite_url


def _status_kb(key: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    raise KeyError(key)


def _reset_peak() -> None:
    with contextlib.suppress(OSError):  # refused: the peak since the start stands in
        Path("/proc/self/clear_refs").write_text("5")


def _post(api: ApiClient, spec: dict[str, object], name: str, content: bytes) -> object:
    return api.post(
        "/risk-models/probe/versions",
        data={"spec": json.dumps(spec)},
        files={"data": (name, content, "application/octet-stream")},
    )


def main() -> None:
    spec = json.loads(sys.argv[1])
    path = Path(sys.argv[2])
    extra = json.loads(sys.argv[3]) if len(sys.argv) > 3 else {}
    with tempfile.TemporaryDirectory() as tmp:
        settings = Settings(database_url=sqlite_url(Path(tmp)), auth_required=False, **extra)
        api = ApiClient(create_app(settings))
        try:
            buf = io.BytesIO()
            pq.write_table(pa.table(segments(1500, seed=5)), buf)
            warm = _post(api, SPEC, "warm.parquet", buf.getvalue())
            assert warm.status_code == 201, warm.text  # type: ignore[attr-defined]
            content = path.read_bytes()
            rss0 = _status_kb("VmRSS")
            _reset_peak()
            pool0 = pa.default_memory_pool().max_memory()
            r = _post(api, spec, path.name, content)
            rss1 = max(_status_kb("VmHWM"), rss0)
            pool1 = pa.default_memory_pool().max_memory()
        finally:
            api.close()
    out = {
        "status": r.status_code,  # type: ignore[attr-defined]
        "error": r.json().get("error"),  # type: ignore[attr-defined]
        "file_kb": round(len(content) / 1024, 1),
        "rss_extra_mb": round((rss1 - rss0) / 1024, 1),
        "arrow_extra_mb": round((pool1 - pool0) / 2**20, 1),
    }
    print(json.dumps(out))


if __name__ == "__main__":
    main()
