"""``riskfit serve --host --port --database-url [--workers N] [--demo]``: run under uvicorn.

With ``--workers N`` (N > 1) uvicorn starts N processes that each build the app with
:func:`service.app.create_app` from the environment; the flags given here are passed to them
as ``RISKFIT_*`` variables, so every worker sees the same settings. Migrations at start-up
are safe to run from several processes (see ``models_store.db.upgrade``).

Behind a reverse proxy: ``--trusted-proxies`` (``RISKFIT_TRUSTED_PROXIES``) names the proxies
whose ``X-Forwarded-Proto``/``X-Forwarded-For`` uvicorn believes, so the app sees https and
the client's address; ``--cookie-secure always`` (``RISKFIT_COOKIE_SECURE``) sets ``Secure``
on the dashboard cookies whatever the proxy says. Connection hygiene (:func:`uvicorn_options`):
idle keep-alive connections close after ``--keep-alive`` seconds, a stalled request body gets
408 after ``--body-timeout`` seconds (in the app: :mod:`service.web_security`), and
``--limit-concurrency`` caps the connections of one process (503 beyond). uvicorn has no
timeout for slowly sent request *headers*: put a reverse proxy in front of any port that
strangers can reach (deploy/README.md).
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
    parser.add_argument(
        "--trusted-proxies",
        help="comma-separated proxy addresses/CIDRs whose X-Forwarded-* headers are believed "
        "(default: RISKFIT_TRUSTED_PROXIES, 127.0.0.1,::1; '*' = every peer)",
    )
    parser.add_argument(
        "--cookie-secure",
        choices=("auto", "always", "never"),
        help="Secure flag of the dashboard cookies (default: RISKFIT_COOKIE_SECURE, auto = "
        "when the request came over https)",
    )
    parser.add_argument(
        "--metrics-access",
        choices=("open", "key"),
        help="GET /metrics needs an API key (key, the default: RISKFIT_METRICS_ACCESS) or not",
    )
    parser.add_argument(
        "--body-timeout",
        type=float,
        help="seconds a request body may stall before 408 (default: RISKFIT_BODY_TIMEOUT_SECONDS, "
        "30)",
    )
    parser.add_argument(
        "--keep-alive",
        type=int,
        help="seconds an idle keep-alive connection stays open (default: "
        "RISKFIT_KEEP_ALIVE_SECONDS, 5)",
    )
    parser.add_argument(
        "--limit-concurrency",
        type=int,
        help="most concurrent connections per process, 503 beyond (default: "
        "RISKFIT_LIMIT_CONCURRENCY, no limit)",
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
            "trusted_proxies": getattr(args, "trusted_proxies", None),
            "cookie_secure": getattr(args, "cookie_secure", None),
            "metrics_access": getattr(args, "metrics_access", None),
            "body_timeout_seconds": getattr(args, "body_timeout", None),
            "keep_alive_seconds": getattr(args, "keep_alive", None),
            "limit_concurrency": getattr(args, "limit_concurrency", None),
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
    options = uvicorn_options(settings)
    if workers == 1:
        uvicorn.run(app, log_level=args.log_level, **options)
        return 0
    os.environ.update(worker_environment(settings))
    uvicorn.run(
        "service.app:create_app",
        factory=True,
        workers=workers,
        log_level=args.log_level,
        **options,
    )
    return 0


def uvicorn_options(settings: Settings) -> dict[str, Any]:
    """Keyword arguments of :func:`uvicorn.run` that the settings decide (besides the app)."""
    return {
        "host": settings.host,
        "port": settings.port,
        "proxy_headers": True,
        "forwarded_allow_ips": settings.trusted_proxies,
        "timeout_keep_alive": settings.keep_alive_seconds,
        "limit_concurrency": settings.limit_concurrency,
        "h11_max_incomplete_event_size": 16 * 1024,  # request line + headers (h11; uvicorn's)
        "server_header": False,  # no server name and version in every answer
    }


def worker_environment(settings: Settings) -> dict[str, str]:
    """The ``RISKFIT_*`` variables that make a worker process build these same settings."""
    return {
        "RISKFIT_HOST": settings.host,
        "RISKFIT_PORT": str(settings.port),
        "RISKFIT_DATABASE_URL": str(settings.database_url),
        "RISKFIT_AUTH_REQUIRED": "true" if settings.auth_required else "false",
        "RISKFIT_TRUSTED_PROXIES": settings.trusted_proxies,
        "RISKFIT_COOKIE_SECURE": settings.cookie_secure,
        "RISKFIT_METRICS_ACCESS": settings.metrics_access,
        "RISKFIT_BODY_TIMEOUT_SECONDS": repr(settings.body_timeout_seconds),
    }
