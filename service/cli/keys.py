"""``riskfit keys create|list|revoke``: manage API keys directly in the database.

    riskfit keys create --role admin [--name NAME] [--database-url URL]
    riskfit keys list [--database-url URL]
    riskfit keys revoke KEY_ID [--database-url URL]

These work on the store given by ``--database-url`` (default ``RISKFIT_DATABASE_URL``), not
over HTTP, so the first admin key can be made before any key exists; ``create`` applies the
migrations first. The new key is the last line ``create`` prints, and is shown only there.
Audit events written here carry no key id (the command line acts for the operator).
"""

from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING, Any

from models_store.orm import ROLES
from service.config import Settings, get_settings

if TYPE_CHECKING:
    from service.security import IssuedKey


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser("keys", help="create, list or revoke API keys")
    actions = parser.add_subparsers(dest="keys_command", metavar="ACTION", required=True)
    create = actions.add_parser("create", help="create a key and print it (shown once)")
    create.add_argument("--role", required=True, choices=ROLES, help="scorer, modeler or admin")
    create.add_argument("--name", default=None, help="who holds the key (default: the role)")
    create.set_defaults(func=_create)
    listing = actions.add_parser("list", help="list keys (ids, prefixes, roles; never the keys)")
    listing.set_defaults(func=_list)
    rev = actions.add_parser("revoke", help="revoke a key by id")
    rev.add_argument("key_id", type=int, help="id shown by `riskfit keys list`")
    rev.set_defaults(func=_revoke)
    for sub in (create, listing, rev):
        sub.add_argument("--database-url", help="SQLAlchemy URL (default: RISKFIT_DATABASE_URL)")


def _settings(database_url: str | None) -> Settings:
    base = get_settings()
    if database_url:
        return base.model_copy(update={"database_url": database_url})
    return base


def _session(settings: Settings, *, migrate: bool) -> Any:
    from models_store.db import make_engine, make_session_factory, upgrade

    engine = make_engine(settings.database_url, busy_timeout_ms=settings.sqlite_busy_timeout_ms)
    if migrate:
        upgrade(engine)
    return engine, make_session_factory(engine)()


def create_key_in_store(database_url: str | None, *, role: str, name: str) -> IssuedKey:
    """Migrate the store at ``database_url`` (default: the settings') and add a key to it."""
    from service.security import issue_key

    settings = _settings(database_url)
    engine, session = _session(settings, migrate=True)
    try:
        issued = issue_key(session=session, settings=settings, role=role, name=name)
        session.commit()
    finally:
        session.close()
        engine.dispose()
    return issued


def _create(args: argparse.Namespace) -> int:
    name = args.name or args.role
    if not name.strip() or len(name) > 200:
        print("riskfit keys create: --name must be 1 to 200 characters", file=sys.stderr)
        return 2
    issued = create_key_in_store(args.database_url, role=args.role, name=name)
    print(f"created API key id {issued.id} (role {issued.role}, name {issued.name!r})")
    print("the key is shown only now; give it to its holder and keep no other copy:")
    print(issued.key)
    return 0


def _when(value: Any) -> str:
    return "-" if value is None else value.strftime("%Y-%m-%dT%H:%M:%SZ")


def _list(args: argparse.Namespace) -> int:
    from models_store.keys import list_keys

    engine, session = _session(_settings(args.database_url), migrate=False)
    try:
        keys = list_keys(session=session)
    finally:
        session.close()
        engine.dispose()
    header = ("id", "prefix", "role", "name", "created", "last used", "revoked")
    rows = [
        (
            str(k.id),
            k.prefix + "...",
            k.role,
            k.name,
            _when(k.created_at),
            _when(k.last_used_at),
            _when(k.revoked_at),
        )
        for k in keys
    ]
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    for row in [header, *rows]:
        print("  ".join(cell.ljust(w) for cell, w in zip(row, widths, strict=True)).rstrip())
    print(f"{len(keys)} key(s), {sum(k.revoked_at is None for k in keys)} active")
    return 0


def _revoke(args: argparse.Namespace) -> int:
    from service.errors import NotFoundError
    from service.security import revoke

    engine, session = _session(_settings(args.database_url), migrate=False)
    try:
        row = revoke(session=session, key_id=args.key_id)
        session.commit()
    except NotFoundError as exc:
        print(f"riskfit keys revoke: {exc}", file=sys.stderr)
        return 1
    finally:
        session.close()
        engine.dispose()
    print(
        f"revoked API key id {row.id} ({row.prefix}..., role {row.role}) at {_when(row.revoked_at)}"
    )
    return 0
