"""``riskfit db upgrade`` (apply migrations) and ``riskfit db check`` (integrity)."""

from __future__ import annotations

import argparse
from typing import Any

from service.config import get_settings


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser("db", help="database maintenance")
    actions = parser.add_subparsers(dest="db_command", metavar="ACTION", required=True)
    up = actions.add_parser("upgrade", help="apply the store's migrations up to head")
    up.add_argument("--database-url", help="SQLAlchemy URL (default: RISKFIT_DATABASE_URL)")
    up.set_defaults(func=_upgrade)
    check = actions.add_parser("check", help="integrity check of the database")
    check.add_argument("--database-url", help="SQLAlchemy URL (default: RISKFIT_DATABASE_URL)")
    check.set_defaults(func=_check)


def _url(args: argparse.Namespace) -> str:
    url: str = args.database_url or get_settings().database_url
    return url


def _upgrade(args: argparse.Namespace) -> int:
    from models_store.db import head_revision, upgrade

    upgrade(_url(args))
    print(f"database at revision {head_revision()}")
    return 0


def _check(args: argparse.Namespace) -> int:
    from models_store.db import check_integrity, make_engine

    engine = make_engine(_url(args))
    try:
        problems = check_integrity(engine)
    finally:
        engine.dispose()
    for problem in problems:
        print(problem)
    print("ok" if not problems else f"{len(problems)} problem(s)")
    return 0 if not problems else 1
