"""``riskfit serve --host --port --database-url [--workers N] [--demo]``: run under uvicorn.

With ``--workers N`` (N > 1) uvicorn starts N processes that each build the app with
:func:`service.app.create_app` from the environment; the flags given here are passed to them
as ``RISKFIT_*`` variables, so every worker sees the same settings. Migrations at start-up
are safe to run from several processes (see ``models_store.db.upgrade``).
"""

from __future__ import annotations

import argparse
import os
import sys
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
    parser.add_argument(
        "--workers", type=int, default=1, help="worker processes (default 1; e.g. one per core)"
    )
    parser.add_argument(
        "--no-auth", action="store_true", help="no API keys (local development, 127.0.0.1 only)"
    )
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
    if getattr(args, "no_auth", False):
        overrides["auth_required"] = False
    return Settings(**overrides)


def no_auth_allowed(host: str) -> bool:
    """``--no-auth`` binds only to 127.0.0.1; says so on stderr either way."""
    if host != "127.0.0.1":
        print(
            f"riskfit serve: --no-auth refuses to bind to {host}; use --host 127.0.0.1",
            file=sys.stderr,
        )
        return False
    print(
        "WARNING: riskfit serve --no-auth: no API keys are checked; every caller is an "
        "admin. Local development on 127.0.0.1 only.",
        file=sys.stderr,
    )
    return True


def run(args: argparse.Namespace) -> int:
    import uvicorn

    from service.app import create_app

    settings = settings_from_args(args)
    if not settings.auth_required and not no_auth_allowed(settings.host):
        return 2
    app = create_app(settings)
    if args.demo:
        from service.cli.demo import seed_demo_into

        seed_demo_into(settings)
    workers = getattr(args, "workers", 1)
    if workers < 1:
        print(f"riskfit serve: --workers must be >= 1, not {workers}", file=sys.stderr)
        return 2
    if workers == 1:
        uvicorn.run(app, host=settings.host, port=settings.port, log_level=args.log_level)
        return 0
    os.environ.update(worker_environment(settings))
    uvicorn.run(
        "service.app:create_app",
        factory=True,
        workers=workers,
        host=settings.host,
        port=settings.port,
        log_level=args.log_level,
    )
    return 0


def worker_environment(settings: Settings) -> dict[str, str]:
    """The ``RISKFIT_*`` variables that make a worker process build these same settings."""
    return {
        "RISKFIT_HOST": settings.host,
        "RISKFIT_PORT": str(settings.port),
        "RISKFIT_DATABASE_URL": str(settings.database_url),
        "RISKFIT_AUTH_REQUIRED": "true" if settings.auth_required else "false",
    }
