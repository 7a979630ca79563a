"""Shared checks for the deployment files: `riskfit` command lines and the app's routes."""

from __future__ import annotations

import argparse
import shlex
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path

import pytest

from service.cli import build_parser

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"


def subcommands(parser: argparse.ArgumentParser) -> dict[str, argparse.ArgumentParser]:
    """Subcommand name -> its parser (argparse keeps them on the sub-parsers action)."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return dict(action.choices)
    return {}


def check_riskfit_argv(argv: Sequence[str], where: str) -> argparse.Namespace:
    """Assert ``argv`` (``riskfit SUB ...``) parses with the real CLI and names a handler.

    Skips, saying so, when the subcommand is not written yet.
    """
    assert Path(argv[0]).name == "riskfit", f"{where}: runs {argv[0]!r}, not riskfit"
    parser = build_parser()
    available = subcommands(parser)
    if len(argv) < 2 or argv[1] not in available:
        pytest.skip(
            f"{where}: `riskfit {argv[1] if len(argv) > 1 else ''}` is not in the CLI yet "
            f"(it has {sorted(available)})"
        )
    try:
        namespace = parser.parse_args(list(argv[1:]))
    except SystemExit as exc:  # argparse exits on an unknown flag or a missing argument
        pytest.fail(f"{where}: `{shlex.join(argv)}` does not parse (exit {exc.code})")
    assert callable(getattr(namespace, "func", None)), f"{where}: {argv[1]} has no handler"
    return namespace


def run_help(subcommand: str) -> subprocess.CompletedProcess[str]:
    """``riskfit SUB --help`` through the installed console script's entry point."""
    code = "import sys; from service.cli import main; sys.exit(main(sys.argv[1:]))"
    return subprocess.run(
        [sys.executable, "-c", code, subcommand, "--help"],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
        cwd=REPO,
    )
