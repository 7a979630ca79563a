"""``riskfit demo`` and ``riskfit serve --demo``: wiring to ``service.demo`` (the demo package).

``riskfit demo`` drives a running server over HTTP; ``serve --demo`` first runs the same demo
in-process against the app it is about to serve (the demo skips itself if the model exists).
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import Any

from service.config import Settings


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser("demo", help="create the demo model on a running server")
    parser.add_argument("--url", default="http://127.0.0.1:8000", help="a running riskfit")
    parser.add_argument(
        "--api-key",
        default=os.environ.get("RISKFIT_API_KEY"),
        help="a modeler key (default: RISKFIT_API_KEY; else one is created in --database-url)",
    )
    parser.add_argument("--database-url", help="the server's store (default: RISKFIT_DATABASE_URL)")
    parser.set_defaults(func=run)


def _own_key(args: argparse.Namespace) -> str:
    """A modeler key created for the demo in the server's store, printed once."""
    from service.cli.keys import create_key_in_store

    issued = create_key_in_store(args.database_url, role="modeler", name="demo")
    print(f"riskfit demo: created API key id {issued.id} (role modeler) for itself: {issued.key}")
    return issued.key


def run(args: argparse.Namespace) -> int:
    from service import demo

    try:
        demo.run_demo(url=args.url, api_key=args.api_key or _own_key(args))
    except demo.DemoError as exc:
        print(f"riskfit demo: {exc}", file=sys.stderr)
        return 1
    return 0


def seed_demo_into(settings: Settings) -> None:
    """Used by ``riskfit serve --demo``: run the demo in-process on the served database."""
    from service import demo
    from service.app import create_app
    from service.demo.inprocess import in_process_client

    with in_process_client(create_app(settings)) as client:
        demo.run_demo(client)
