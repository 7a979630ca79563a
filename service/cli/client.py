"""``riskfit fit`` and ``riskfit score``: talk to a running riskfit over HTTP (httpx).

    riskfit fit --spec spec.json --data segments.csv [--model NAME] [--url URL]
    riskfit fit --spec spec.json --data /data/segments/ --engine local|dask [--scheduler ADDR]
    riskfit score --records records.json|.csv [--passthrough COL,...] [--model NAME] [--url URL]

Uploads show their progress on stderr; answers are printed as JSON on stdout. The exit code
is 0 on success, 1 when the server refused the request (its error body is printed).

``score`` sends each record's fields as they are (a CSV column ``key`` is the record's key).
The server refuses a field that is not one of the model's inputs; ``--passthrough`` names
columns (e.g. a CSV's own id) to send in each record's ``passthrough`` object instead: they are
echoed with the record's score and not used for scoring. On such a refusal the command adds a
one-line hint on stderr naming the columns.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path
from typing import IO, Any

DEFAULT_URL = "http://127.0.0.1:8000"
DEFAULT_MODEL = "water-main-breaks"


class ProgressReader:
    """A file wrapper that reports bytes read (httpx streams multipart files by ``read``)."""

    def __init__(self, f: IO[bytes], total: int, label: str, out: IO[str]) -> None:
        self.f, self.total, self.label, self.out = f, max(total, 1), label, out
        self.done = 0
        self._last = 0.0

    def read(self, size: int = -1) -> bytes:
        chunk = self.f.read(size)
        self.done += len(chunk)
        now = time.monotonic()
        if now - self._last > 0.2 or not chunk:
            self._last = now
            pct = 100.0 * self.done / self.total
            self.out.write(
                f"\r{self.label}: {self.done / 1e6:.1f} MB of "
                f"{self.total / 1e6:.1f} MB ({pct:.0f}%)"
            )
            if not chunk:
                self.out.write(" - uploaded, fitting...\n")
            self.out.flush()
        return chunk


def _add_common(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--url",
        default=os.environ.get("RISKFIT_URL", DEFAULT_URL),
        help=f"riskfit base URL (default: RISKFIT_URL or {DEFAULT_URL})",
    )
    parser.add_argument("--model", default=DEFAULT_MODEL, help="model name")
    parser.add_argument(
        "--api-key",
        default=os.environ.get("RISKFIT_API_KEY"),
        help="API key (default: RISKFIT_API_KEY)",
    )
    parser.add_argument("--timeout", type=float, default=600.0, help="seconds to wait")


def register(subparsers: Any) -> None:
    fit = subparsers.add_parser("fit", help="fit a new version on a running server")
    fit.add_argument("--spec", required=True, type=Path, help="JSON file: features, options")
    fit.add_argument("--data", required=True, type=Path, help="CSV or Parquet training data")
    fit.add_argument(
        "--engine",
        choices=["upload", "local", "dask"],
        default="upload",
        help="upload: send the file (default); local: the server streams DATA, a path it can "
        "read inside its fit_data_dirs; dask: the server fits DATA on a Dask cluster",
    )
    fit.add_argument("--scheduler", help="Dask scheduler address (one the server allows)")
    _add_common(fit)
    fit.set_defaults(func=run_fit)
    score = subparsers.add_parser("score", help="score records on a running server")
    score.add_argument(
        "--records",
        required=True,
        type=Path,
        help="JSON list of records (or {'records': [...]}) or a CSV file",
    )
    score.add_argument("--version", type=int, help="version (default: the champion)")
    score.add_argument("--confidence-level", type=float, help="interval level, e.g. 0.9")
    score.add_argument("--explain", action="store_true", help="add per-term contributions")
    score.add_argument(
        "--passthrough",
        metavar="COL,...",
        help="columns (not features) to send in each record's passthrough object, echoed "
        "with its score; other columns than the features and 'key' are refused",
    )
    _add_common(score)
    score.set_defaults(func=run_score)


def _headers(args: argparse.Namespace) -> dict[str, str]:
    return {"Authorization": f"Bearer {args.api_key}"} if args.api_key else {}


def _finish(response: Any) -> int:
    try:
        body = response.json()
    except ValueError:
        body = {"status": response.status_code, "text": response.text[:2000]}
    print(json.dumps(body, indent=2))
    return 0 if response.is_success else 1


def run_fit_by_path(args: argparse.Namespace) -> int:
    """The server reads ``--data`` itself (``data.path``): nothing is uploaded."""
    import httpx

    body = json.loads(args.spec.read_text(encoding="utf-8"))
    data: dict[str, Any] = {"path": str(args.data.absolute()), "engine": args.engine}
    if args.scheduler:
        data["scheduler"] = args.scheduler
    body["data"] = data
    with httpx.Client(base_url=args.url, timeout=args.timeout) as c:
        response = c.post(f"/risk-models/{args.model}/versions", json=body, headers=_headers(args))
    return _finish(response)


def run_fit(args: argparse.Namespace) -> int:
    import httpx

    if getattr(args, "engine", "upload") != "upload":
        return run_fit_by_path(args)
    spec = args.spec.read_text(encoding="utf-8")
    size = args.data.stat().st_size
    with args.data.open("rb") as f, httpx.Client(base_url=args.url, timeout=args.timeout) as c:
        reader = ProgressReader(f, size, f"uploading {args.data.name}", sys.stderr)
        response = c.post(
            f"/risk-models/{args.model}/versions",
            data={"spec": spec},
            files={"data": (args.data.name, reader, "application/octet-stream")},  # type: ignore[dict-item]
            headers=_headers(args),
        )
    return _finish(response)


def _records(path: Path) -> list[dict[str, Any]]:
    if path.suffix.lower() == ".csv":
        import pyarrow.csv as pa_csv

        rows: list[dict[str, Any]] = pa_csv.read_csv(path).to_pylist()
        return rows
    loaded = json.loads(path.read_text(encoding="utf-8"))
    records: list[dict[str, Any]] = loaded["records"] if isinstance(loaded, dict) else loaded
    return records


def _with_passthrough(records: list[dict[str, Any]], names: list[str]) -> None:
    """Move the fields ``names`` of every record into its ``passthrough`` object."""
    for r in records:
        r["passthrough"] = {n: r.pop(n) for n in names if n in r}


def run_score(args: argparse.Namespace) -> int:
    import httpx

    records = _records(args.records)
    names = [n.strip() for n in (args.passthrough or "").split(",") if n.strip()]
    missing = [n for n in names if records and n not in records[0]]
    if missing:
        print(
            f"riskfit score: --passthrough column(s) {missing} not in {args.records}",
            file=sys.stderr,
        )
        return 1
    if names:
        _with_passthrough(records, names)
    body: dict[str, Any] = {"records": records, "explain": args.explain}
    if args.version is not None:
        body["version"] = args.version
    if args.confidence_level is not None:
        body["confidence_level"] = args.confidence_level
    with httpx.Client(base_url=args.url, timeout=args.timeout) as c:
        response = c.post(f"/risk-models/{args.model}/scores", json=body, headers=_headers(args))
    code = _finish(response)
    unknown = _unknown_fields(response)
    if unknown:
        print(
            f"riskfit score: {args.records} has column(s) {', '.join(unknown)} that the model "
            f"does not use; send them back with each score with --passthrough "
            f"{','.join(unknown)}, or remove them",
            file=sys.stderr,
        )
    return code


def _unknown_fields(response: Any) -> list[str]:
    """The unknown field names of a 422 refusal for unknown record fields (else [])."""
    if response.status_code != 422:
        return []
    try:
        details = response.json()["error"].get("details") or {}
    except (ValueError, KeyError, TypeError, AttributeError):
        return []
    unknown = details.get("unknown") if isinstance(details, dict) else None
    return [str(u) for u in unknown] if isinstance(unknown, list) else []
