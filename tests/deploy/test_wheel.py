"""The image's build stage, without a container engine: build the wheel from exactly the
files the Dockerfile copies, check it ships every package, the migrations and the console
script, and run `riskfit db upgrade` from the unpacked wheel (what the container's start-up
does first)."""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from tests.deploy._commands import REPO
from tests.deploy.test_dockerfile import _instructions

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    src = tmp_path_factory.mktemp("build") / "src"
    src.mkdir()
    for keyword, args in _instructions():
        if keyword == "COPY" and "--from" not in args:
            *sources, _ = args.split()
            for name in sources:
                copy = shutil.copytree if (REPO / name).is_dir() else shutil.copy2
                copy(REPO / name, src / name)
    out = src.parent / "wheels"
    # the same command as the Dockerfile's build stage (with build isolation: needs PyPI)
    built = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "--wheel-dir", str(out), "."],
        cwd=src,
        capture_output=True,
        text=True,
        timeout=600,
        check=False,
    )
    if built.returncode != 0 and "Could not find a version" in built.stderr:
        pytest.skip(f"no package index for the build backend: {built.stderr[-300:]}")
    assert built.returncode == 0, built.stderr[-2000:]
    (path,) = out.glob("riskfit-*.whl")
    return path


def test_wheel_ships_every_package_the_migrations_and_the_command(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    for package in ("service", "models_store"):
        for init in (REPO / package).rglob("__init__.py"):
            assert str(init.relative_to(REPO)) in names, init
    for migration in (REPO / "models_store" / "migrations").rglob("*.py"):
        assert str(migration.relative_to(REPO)) in names, migration
    (entry_points,) = [n for n in names if n.endswith(".dist-info/entry_points.txt")]
    text = zipfile.ZipFile(wheel).read(entry_points).decode()
    assert "riskfit = service.cli:main" in text


def test_the_unpacked_wheel_migrates_a_fresh_database(wheel: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(site)
    url = f"sqlite:///{tmp_path / 'riskfit.db'}"
    code = (
        "import sys; sys.path.insert(0, sys.argv[1]); import service, service.cli;"
        "assert service.__file__.startswith(sys.argv[1]), service.__file__;"
        "sys.exit(service.cli.main(['db', 'upgrade', '--database-url', sys.argv[2]]))"
    )
    done = subprocess.run(
        [sys.executable, "-c", code, str(site), url],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    assert "revision" in done.stdout
