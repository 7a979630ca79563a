"""``riskfit demo``: the seeded water-utility scenario (written in ``service/demo/``).

This module only wires the command; the scenario and its runner belong to the demo package,
which exposes ``service.demo.run_demo``.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from typing import Any

from service.config import Settings


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser("demo", help="create the demo model and walk through it")
    parser.add_argument("--url", default="http://127.0.0.1:8000", help="a running riskfit")
    parser.add_argument("--database-url", help="SQLAlchemy URL (default: RISKFIT_DATABASE_URL)")
    parser.set_defaults(func=run)


def _run_demo() -> Any:
    try:
        module = importlib.import_module("service.demo")
    except ModuleNotFoundError as exc:
        if exc.name not in ("service.demo",):
            raise
        return None
    return getattr(module, "run_demo", None)


def run(args: argparse.Namespace) -> int:
    run_demo = _run_demo()
    if run_demo is None:
        print("riskfit demo: the demo scenario (service.demo) is not installed", file=sys.stderr)
        return 1
    result = run_demo(url=args.url)
    return int(result or 0)


def seed_demo_into(settings: Settings) -> None:
    """Used by ``riskfit serve --demo``: seed the demo model into an empty store, if possible."""
    module: Any
    try:
        module = importlib.import_module("service.demo")
    except ModuleNotFoundError:
        print("riskfit serve --demo: service.demo is not installed; serving without it")
        return
    seed = getattr(module, "seed_database", None)
    if seed is None:
        print("riskfit serve --demo: service.demo has no seed_database(settings); skipping")
        return
    seed(settings)
