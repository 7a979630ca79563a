"""systemd units and the crontab example: they parse, name real `riskfit` commands, and the
timer starts the refit unit."""

from __future__ import annotations

import configparser
import os
import re
import shlex
import shutil
import subprocess
from pathlib import Path

import pytest

from tests.deploy._commands import DEPLOY, check_riskfit_argv

SYSTEMD = DEPLOY / "systemd"
UNITS = ["riskfit.service", "riskfit-refit.service", "riskfit-refit.timer"]


def _unit(name: str) -> configparser.ConfigParser:
    # systemd units are INI-like; repeated keys are legal there, hence strict=False
    parser = configparser.ConfigParser(strict=False, interpolation=None)
    parser.optionxform = str  # type: ignore[assignment,method-assign]
    parser.read_string((SYSTEMD / name).read_text(), source=name)
    return parser


def test_units_parse_with_the_expected_sections() -> None:
    assert sorted(p.name for p in SYSTEMD.iterdir()) == sorted(UNITS)
    assert _unit("riskfit.service").sections() == ["Unit", "Service", "Install"]
    assert _unit("riskfit-refit.service").sections() == ["Unit", "Service"]
    assert _unit("riskfit-refit.timer").sections() == ["Unit", "Timer", "Install"]
    assert _unit("riskfit-refit.service")["Service"]["Type"] == "oneshot"
    for name in ("riskfit.service", "riskfit-refit.service"):
        service = _unit(name)["Service"]
        assert service["User"] == "riskfit" and service["EnvironmentFile"].startswith("/etc/")


def test_the_timer_starts_the_refit_unit() -> None:
    timer = _unit("riskfit-refit.timer")["Timer"]
    assert (SYSTEMD / timer["Unit"]).is_file()
    assert timer["Persistent"] in {"yes", "true", "on", "1"}  # catch up on missed nights


@pytest.mark.parametrize("name", ["riskfit.service", "riskfit-refit.service"])
def test_exec_start_is_a_real_riskfit_command(name: str) -> None:
    argv = shlex.split(_unit(name)["Service"]["ExecStart"])
    assert argv[0].startswith("/"), "systemd wants an absolute path"
    check_riskfit_argv(argv, f"{name} ExecStart")


_SYSTEMD_ANALYZE = shutil.which("systemd-analyze")


@pytest.mark.skipif(_SYSTEMD_ANALYZE is None, reason="systemd-analyze is not installed")
def test_systemd_analyze_verifies_the_units(tmp_path: Path) -> None:
    # systemd's own parser; the install paths are swapped for this machine's riskfit and user
    riskfit = shutil.which("riskfit")
    if riskfit is None:
        pytest.skip("the riskfit console script is not on PATH (pip install -e .)")
    for name in UNITS:
        text = (SYSTEMD / name).read_text().replace("/opt/riskfit/bin/riskfit", riskfit)
        text = re.sub(r"^(User|Group)=.*$", r"\1=root", text, flags=re.M)
        text = text.replace("EnvironmentFile=/", "EnvironmentFile=-/")
        (tmp_path / name).write_text(text)
    out = subprocess.run(
        [str(_SYSTEMD_ANALYZE), "verify", "--man=no", *(str(tmp_path / n) for n in UNITS)],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert out.returncode == 0 and "ignoring" not in out.stderr, out.stderr
    calendar = _unit("riskfit-refit.timer")["Timer"]["OnCalendar"]
    cal = subprocess.run(
        [str(_SYSTEMD_ANALYZE), "calendar", calendar], capture_output=True, timeout=30, check=False
    )
    assert cal.returncode == 0


def _cron_entries() -> list[tuple[list[str], str]]:
    """(five time fields, command) per job line; comments and VAR=value lines skipped."""
    entries = []
    for line in (DEPLOY / "crontab.example").read_text().splitlines():
        if not line.strip() or line.lstrip().startswith("#") or re.match(r"^[A-Z_]+=", line):
            continue
        fields = line.split(None, 5)
        entries.append((fields[:5], fields[5]))
    return entries


def test_crontab_has_one_nightly_refit_job() -> None:
    ((times, command),) = _cron_entries()
    field = re.compile(r"^(\*|\d+(-\d+)?)(/\d+)?(,(\*|\d+(-\d+)?)(/\d+)?)*$")
    assert all(field.match(t) for t in times), times
    minute, hour = int(times[0]), int(times[1])
    assert 0 <= minute < 60 and 0 <= hour < 24 and times[2:] == ["*", "*", "*"]
    argv = shlex.split(command.rsplit("&&", 1)[1])
    check_riskfit_argv(argv, "crontab.example")


def test_crontab_command_exports_the_env_file_to_riskfit(tmp_path: Path) -> None:
    # run the job's shell line with the paths swapped: a stub riskfit prints what it receives
    ((_, command),) = _cron_entries()
    env_file = tmp_path / "refit.env"
    env_file.write_text("RISKFIT_URL=http://127.0.0.1:9\nRISKFIT_API_KEY=k-123\n")
    stub = tmp_path / "riskfit"
    stub.write_text('#!/bin/sh\necho "$RISKFIT_URL $RISKFIT_API_KEY $*"\n')
    stub.chmod(0o755)
    line = command.replace("/etc/riskfit/refit.env", str(env_file)).replace(
        "/opt/riskfit/bin/riskfit", str(stub)
    )
    env = {k: v for k, v in os.environ.items() if not k.startswith("RISKFIT_")}
    out = subprocess.run(
        ["/bin/sh", "-c", line], capture_output=True, text=True, env=env, timeout=30, check=False
    )
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["http://127.0.0.1:9", "k-123", "refit", "water-mains", "--json"]
