"""The ``riskfit`` command line.

Each subcommand lives in a module of this package exposing ``register(subparsers)``, which
adds its parser and sets ``func`` (``argparse.Namespace -> int`` exit code) as a default.
Adding a command: write the module and append its name to :data:`COMMANDS`.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from service import __version__

__all__ = ["COMMANDS", "build_parser", "main"]

#: Subcommand modules, in the order ``riskfit --help`` lists them.
COMMANDS: list[str] = [
    "service.cli.serve",
    "service.cli.demo",
    "service.cli.db",
    "service.cli.client",
    "service.cli.refit",
    "service.cli.keys",
]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="riskfit", description="Fit, version, serve and monitor logistic risk models."
    )
    parser.add_argument("--version", action="version", version=f"riskfit {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        importlib.import_module(name).register(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of ``riskfit``; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    func = getattr(args, "func", None)
    if func is None:
        parser.print_help(sys.stderr)
        return 2
    code: int = func(args)
    return code


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
