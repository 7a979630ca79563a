"""``riskfit serve --host --port --database-url [--demo]``: run the service under uvicorn."""

from __future__ import annotations

import argparse
from typing import Any

from service.config import Settings


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser("serve", help="run the HTTP service")
    parser.add_argument("--host", help="address to bind (default: RISKFIT_HOST, 127.0.0.1)")
    parser.add_argument("--port", type=int, help="port (default: RISKFIT_PORT, 8000)")
    parser.add_argument("--database-url", help="SQLAlchemy URL (default: RISKFIT_DATABASE_URL)")
    parser.add_argument(
        "--demo", action="store_true", help="create the demo model first if the store is empty"
    )
    parser.add_argument("--log-level", default="info", help="uvicorn log level")
    parser.set_defaults(func=run)


def settings_from_args(args: argparse.Namespace) -> Settings:
    """Environment settings overridden by whichever flags were given."""
    overrides = {
        k: v
        for k, v in {
            "host": args.host,
            "port": args.port,
            "database_url": args.database_url,
        }.items()
        if v is not None
    }
    return Settings(**overrides)


def run(args: argparse.Namespace) -> int:
    import uvicorn

    from service.app import create_app

    settings = settings_from_args(args)
    app = create_app(settings)
    if args.demo:
        from service.cli.demo import seed_demo_into

        seed_demo_into(settings)
    uvicorn.run(app, host=settings.host, port=settings.port, log_level=args.log_level)
    return 0
