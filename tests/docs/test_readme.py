"""The README is part of the product: its commands, settings and example spec must be true."""

from __future__ import annotations

import json
import re
import shlex
from pathlib import Path

import pytest

from service.config import Settings
from service.demo.scenario import generate_segments
from tests.api.conftest import ApiClient
from tests.deploy._commands import check_riskfit_argv

REPO = Path(__file__).resolve().parents[2]
README = (REPO / "README.md").read_text(encoding="utf-8")
TEST_COMMAND = (
    'python3 -m venv .venv && .venv/bin/pip install ".[test]" && .venv/bin/python -m pytest'
)
SERVE_COMMAND = "python3 -m venv .venv && .venv/bin/pip install . && .venv/bin/riskfit serve --demo"


def _shell_blocks(text: str) -> list[str]:
    return re.findall(r"```sh\n(.*?)```", text, flags=re.S)


def _riskfit_commands(text: str) -> list[list[str]]:
    """Every ``riskfit ...`` invocation in the README's shell blocks (one per line or ``&&``)."""
    pattern = re.compile(r"(?:^|&&\s*)((?:\S*/)?riskfit\s[^&#\n]*)", flags=re.M)
    commands = []
    for block in _shell_blocks(text):
        for match in pattern.finditer(block.replace("\\\n", " ")):
            commands.append(shlex.split(match.group(1)))
    return commands


def test_readme_opens_with_the_job_and_gives_the_two_setup_commands() -> None:
    first_paragraph = README.split("\n\n")[1]
    assert "REST service" in first_paragraph and "maximum likelihood" in first_paragraph
    assert SERVE_COMMAND in README
    assert TEST_COMMAND in README


def test_ci_runs_exactly_the_readme_test_command() -> None:
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert TEST_COMMAND in ci


def test_every_riskfit_command_in_the_readme_parses_with_the_real_cli() -> None:
    commands = _riskfit_commands(README)
    assert len(commands) >= 3, commands
    for argv in commands:
        check_riskfit_argv(argv, f"README.md: {shlex.join(argv)}")


def test_every_setting_is_documented_in_the_configuration_table() -> None:
    missing = [
        f"RISKFIT_{name.upper()}"
        for name in Settings.model_fields
        if f"`RISKFIT_{name.upper()}`" not in README
    ]
    assert missing == [], f"settings missing from README's configuration table: {missing}"


def test_readme_carries_the_cautions() -> None:
    # DESIGN.md's cautions: a score supports a decision; defer to regulation and practice.
    assert "supports a decision; it does not make it" in README
    assert "Defer to local regulation and licensed practice" in README


def test_the_readme_example_spec_fits_on_scenario_data(tmp_path: Path) -> None:
    block = re.search(r"cat > spec.json <<'JSON'\n(.*?)\nJSON", README, flags=re.S)
    assert block, "README lost its example spec"
    spec = json.loads(block.group(1))
    columns = generate_segments(3000, year=1, seed=7)
    outcome = columns.pop("outcome")
    columns.pop("segment_id", None)
    columns[spec["outcome"]] = outcome
    data = {k: [v.item() if hasattr(v, "item") else v for v in col] for k, col in columns.items()}
    from service.app import create_app

    settings = Settings(database_url=f"sqlite:///{tmp_path / 'readme.db'}", auth_required=False)
    api = ApiClient(create_app(settings))
    try:
        answer = api.post(
            "/risk-models/my-mains/versions", json={**spec, "data": {"columns": data}}
        )
        assert answer.status_code == 201, answer.text
        body = answer.json()
        names = [row["name"] for row in body["term_table"]["terms"]]
        assert "prior_breaks_5y:soil=high" in names
        assert body["term_table"]["ci_method"].startswith("profile")
    finally:
        api.close()


@pytest.mark.parametrize("path", ["DEVELOPERS.md", "deploy/README.md"])
def test_linked_documents_exist(path: str) -> None:
    assert (REPO / path).is_file()
