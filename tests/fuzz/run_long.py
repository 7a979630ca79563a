"""The long, on-demand schemathesis run (not collected by pytest): 30,000+ requests.

Starts the real app under uvicorn on 127.0.0.1 (a free port, a fresh SQLite file in a
temporary directory), creates an admin key, fits model ``water-mains`` version 1 and logs a
few scores with keys, then runs the schemathesis CLI over every operation with the checks
``not_a_server_error``, ``response_schema_conformance``, ``status_code_conformance`` and
``content_type_conformance``, and prints the figures: requests sent, answers by status class,
5xx and check failures (from the NDJSON event report). Usage::

    PYTHONPATH=$PWD nice -n 10 /work/venv/bin/python tests/fuzz/run_long.py \\
        [--max-examples 400] [--slow-examples 40] [--max-time SECONDS] [--seed 1] [--out DIR]

The CI-sized run is tests/fuzz/test_openapi_fuzz.py (``RISKFIT_FUZZ_EXAMPLES`` raises it).
"""

from __future__ import annotations

import argparse
import collections
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import httpx

ROOT = Path(__file__).resolve().parents[2]
CHECKS = (
    "not_a_server_error,response_schema_conformance,status_code_conformance,"
    "content_type_conformance"
)


def _free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
        return port


def _prepare(url: str, headers: dict[str, str]) -> None:
    sys.path.insert(0, str(ROOT))
    from tests.api._data import NEW_RECORDS, fit_body

    r = httpx.post(f"{url}/risk-models/water-mains/versions", json=fit_body(), headers=headers)
    assert r.status_code == 201, r.text
    records = [{**rec, "key": f"k{i}"} for i, rec in enumerate(NEW_RECORDS)]
    r = httpx.post(
        f"{url}/risk-models/water-mains/scores", json={"records": records}, headers=headers
    )
    assert r.status_code == 200, r.text


def _tally(ndjson: Path) -> dict[str, Any]:
    """Responses by status and failed checks by name, from the NDJSON event stream (every
    interaction and every check result is recorded there)."""
    statuses: collections.Counter[int] = collections.Counter()
    failures: collections.Counter[str] = collections.Counter()
    examples: list[str] = []
    for line in ndjson.read_text().splitlines():
        event = json.loads(line)
        for status in _iter_key(event, "status_code"):
            if isinstance(status, int):
                statuses[status] += 1
        for checks in _iter_key(event, "checks"):
            if not isinstance(checks, dict):
                continue
            for results in checks.values():
                for check in results if isinstance(results, list) else []:
                    if isinstance(check, dict) and check.get("status") == "failure":
                        failures[str(check.get("name"))] += 1
                        if len(examples) < 50:
                            examples.append(json.dumps(check)[:3000])
    return {
        "statuses": dict(sorted(statuses.items())),
        "failures": dict(failures),
        "examples": examples,
    }


def _iter_key(obj: Any, key: str) -> Any:
    if isinstance(obj, dict):
        for k, v in obj.items():
            if k == key:
                yield v
            else:
                yield from _iter_key(v, key)
    elif isinstance(obj, list):
        for v in obj:
            yield from _iter_key(v, key)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--max-examples", type=int, default=400)
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--workers", type=int, default=1)
    p.add_argument("--slow-examples", type=int, default=40, help="for drift and plots")
    p.add_argument("--max-time", type=int, default=0, help="seconds; 0: no time budget")
    p.add_argument("--out", type=Path, default=None)
    args = p.parse_args(argv)
    # SIGTERM (e.g. `timeout`) unwinds like ^C: schemathesis and the server are stopped too
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(143))
    out = args.out or Path(tempfile.mkdtemp(prefix="riskfit-fuzz-"))
    out.mkdir(parents=True, exist_ok=True)
    db = out / "fuzz.db"
    env = {**os.environ, "RISKFIT_DATABASE_URL": f"sqlite:///{db}", "PYTHONPATH": str(ROOT)}
    sys.path.insert(0, str(ROOT))
    from service.cli.keys import create_key_in_store

    key = create_key_in_store(f"sqlite:///{db}", role="admin", name="fuzz").key
    headers = {"Authorization": f"Bearer {key}"}
    port = _free_port()
    url = f"http://127.0.0.1:{port}"
    log = (out / "server.log").open("w")
    server = subprocess.Popen(
        [
            *(sys.executable, "-m", "uvicorn", "service.app:create_app", "--factory"),
            *("--host", "127.0.0.1", "--port", str(port), "--log-level", "warning"),
        ],
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    try:
        for _ in range(300):
            try:
                if httpx.get(f"{url}/healthz").status_code == 200:
                    break
            except httpx.TransportError:
                time.sleep(0.2)
        _prepare(url, headers)
        ndjson = out / "events.ndjson"
        config = out / "schemathesis.toml"
        # The path parameter ``model`` is pinned so requests reach the handlers (bad model
        # names are the bad-input catalogue's); everything else is generated.
        # Operations that compute a drift view or draw a plot take about a second each: fewer
        # examples there, so the budget goes to the many fast operations.
        config.write_text(
            '[parameters]\n"model" = "water-mains"\n\n'
            "[[operations]]\n"
            'include-path-regex = "drift|reliability|^/dashboard/\\\\{model\\\\}"\n'
            f"generation.max-examples = {args.slow_examples}\n"
        )
        started = time.monotonic()
        cmd = [
            str(Path(sys.executable).with_name("schemathesis")),
            "--config-file",
            str(config),
            "run",
            f"{url}/openapi.json",
            "-H",
            f"Authorization: Bearer {key}",
            "--checks",
            CHECKS,
            "--max-examples",
            str(args.max_examples),
            "--seed",
            str(args.seed),
            "--workers",
            str(args.workers),
            "--phases",
            "examples,coverage,fuzzing",
            "--continue-on-failure",
            "--suppress-health-check",
            "all",
            "--generation-database",
            "none",
            "--request-timeout",
            "120",
            "--report",
            "ndjson",
            "--report-ndjson-path",
            str(ndjson),
            "--no-color",
            *(("--max-time", str(args.max_time)) if args.max_time else ()),
        ]
        done = subprocess.run(cmd, cwd=out, capture_output=True, text=True, check=False)
        (out / "schemathesis.txt").write_text(done.stdout + done.stderr)
        tally = _tally(ndjson)
        n = sum(tally["statuses"].values())
        five = sum(v for k, v in tally["statuses"].items() if k >= 500)
        print(f"output in {out}")
        print(f"requests sent (responses recorded): {n} in {time.monotonic() - started:.0f} s")
        print(f"statuses: {tally['statuses']}")
        print(f"5xx answers: {five}")
        print(f"failed checks by name: {tally['failures']}")
        (out / "failures.txt").write_text("\n".join(tally["examples"]))
        print(done.stdout[-6000:])
        return 0 if five == 0 and not tally["failures"] else 1
    finally:
        server.terminate()
        server.wait(timeout=30)
        log.close()


if __name__ == "__main__":
    raise SystemExit(main())
