"""``riskfit refit MODEL``: ask a running riskfit for a refit; made for cron and timers.

    riskfit refit water-mains [--url URL] [--key KEY] [--method auto] [--since ISO]
        [--until ISO] [--last-n N] [--promote if-better] [--dry-run] [--json]

URL and key default to ``RISKFIT_URL`` and ``RISKFIT_API_KEY``. A few lines go to stdout
(what was decided and why: the tests and gates named), so cron mail says what happened;
``--json`` prints the server's full answer instead.

Exit codes: 0 the refit ran (promoted or not, or an identical earlier refit was answered
again); 2 usage error; 3 the server refused (409 a refit is running, 422 not enough
outcomes or a bad request, 4xx/5xx otherwise; its error is printed on stderr); 4 the server
could not be reached. A refit whose server was killed mid-run holds the lock until its lease
runs out (``lease_expires`` in the 409's details, ``RISKFIT_REFIT_LOCK_LEASE_SECONDS`` on the
server, 60 s by default); the next run after that refits and records the killed one as failed.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from datetime import datetime
from typing import Any

EXIT_OK, EXIT_USAGE, EXIT_REFUSED, EXIT_UNREACHABLE = 0, 2, 3, 4
DEFAULT_URL = "http://127.0.0.1:8000"


def _iso(value: str) -> str:
    try:
        at = datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{value!r} is not an ISO 8601 time") from None
    if at.tzinfo is None:
        raise argparse.ArgumentTypeError(f"{value!r} has no time zone; add Z for UTC")
    return at.isoformat()


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "refit",
        help="refit a model on a running server (for cron)",
        description="Ask a running riskfit to refit MODEL on recent outcomes and gate the "
        "challenger against the champion. Exit 0 when the refit ran (promoted or not), 2 usage, "
        "3 refused by the server (e.g. 409 running, 422 too few outcomes), 4 unreachable.",
    )
    p.add_argument("model", help="model name")
    p.add_argument(
        "--url",
        default=os.environ.get("RISKFIT_URL", DEFAULT_URL),
        help=f"riskfit base URL (default: RISKFIT_URL or {DEFAULT_URL})",
    )
    p.add_argument(
        "--key",
        "--api-key",
        dest="key",
        default=os.environ.get("RISKFIT_API_KEY"),
        help="API key with the modeler role (default: RISKFIT_API_KEY)",
    )
    p.add_argument(
        "--method",
        choices=("auto", "intercept", "recalibrate", "refit"),
        default="auto",
        help="update method (default: auto, the closed test)",
    )
    p.add_argument("--since", type=_iso, help="scores made at or after this time (ISO 8601)")
    p.add_argument("--until", type=_iso, help="scores made before this time (ISO 8601)")
    p.add_argument("--last-n", type=int, help="only the newest N scored records with outcomes")
    p.add_argument(
        "--promote",
        choices=("never", "if-better", "always"),
        default="if-better",
        help="when to promote the challenger (default: if-better)",
    )
    p.add_argument("--dry-run", action="store_true", help="decide, write nothing")
    p.add_argument("--note", help="note kept with a new version")
    p.add_argument("--json", action="store_true", help="print the full JSON answer")
    p.add_argument("--timeout", type=float, default=600.0, help="seconds to wait (default 600)")
    p.set_defaults(func=run)


def _body(args: argparse.Namespace) -> dict[str, Any]:
    body: dict[str, Any] = {"method": args.method, "promote": args.promote}
    for name in ("since", "until", "last_n", "note"):
        if getattr(args, name) is not None:
            body[name] = getattr(args, name)
    if args.dry_run:
        body["dry_run"] = True
    return body


def summary(model: str, answer: dict[str, Any]) -> list[str]:
    """The short text for cron mail: the decision first, then the reasons."""
    before, after = answer.get("champion_before"), answer.get("champion_after")
    new = f"version {answer.get('challenger_version')}"
    if answer.get("dry_run"):
        new = "a new version would be"
    head = {
        "keep": f"champion version {before} kept; no new version",
        "promote": f"{new} promoted (champion was {before})",
        "hold": f"{new} stored, not promoted; champion stays version {after}",
    }.get(str(answer.get("decision")), str(answer.get("decision")))
    flags = [
        f
        for f, on in (
            ("dry run", answer.get("dry_run")),
            ("repeated: earlier result", answer.get("replayed")),
        )
        if on
    ]
    data = answer.get("data") or {}
    lines = [
        f"riskfit refit {model}: {answer.get('method_chosen')} -> {head}"
        + (f" [{'; '.join(flags)}]" if flags else ""),
        f"  data: {data.get('n_obs')} outcomes ({data.get('n_events')} events); development "
        f"{(data.get('development') or {}).get('n_obs')}, holdout "
        f"{(data.get('holdout') or {}).get('n_obs')}",
    ]
    lines += [f"  - {r}" for r in answer.get("reasons", [])]
    return lines


def _refused(response: Any) -> int:
    try:
        err = response.json().get("error", {})
    except ValueError:
        err = {"message": response.text[:500]}
    print(
        f"riskfit refit: the server refused ({response.status_code} {err.get('code', '')}): "
        f"{err.get('message', '')}",
        file=sys.stderr,
    )
    if err.get("remedy"):
        print(f"  remedy: {err['remedy']}", file=sys.stderr)
    if err.get("details"):
        print(f"  details: {json.dumps(err['details'])}", file=sys.stderr)
    return EXIT_REFUSED


def run(args: argparse.Namespace) -> int:
    import httpx

    if args.last_n is not None and args.last_n < 2:
        print("riskfit refit: --last-n must be at least 2", file=sys.stderr)
        return EXIT_USAGE
    headers = {"Authorization": f"Bearer {args.key}"} if args.key else {}
    try:
        with httpx.Client(base_url=args.url, timeout=args.timeout) as client:
            response = client.post(
                f"/risk-models/{args.model}/refits", json=_body(args), headers=headers
            )
    except httpx.HTTPError as exc:
        print(f"riskfit refit: cannot reach {args.url}: {exc}", file=sys.stderr)
        return EXIT_UNREACHABLE
    if not response.is_success:
        return _refused(response)
    answer = response.json()
    if args.json:
        print(json.dumps(answer, indent=2))
    else:
        print("\n".join(summary(args.model, answer)))
    return EXIT_OK
