"""service/stats must stay pure: numpy, scipy and the standard library only (DESIGN.md)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

STATS_DIR = Path(__file__).resolve().parents[2] / "service" / "stats"
ALLOWED_THIRD_PARTY = {"numpy", "scipy"}
# Project modules the core may use: itself and the dependency-free exception tree.
ALLOWED_PROJECT = ("service.stats", "service.errors")


def _imported_modules(path: Path) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found: list[tuple[int, str]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.extend((node.lineno, alias.name) for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found.append((node.lineno, node.module))
    return found


def _is_allowed(module: str) -> bool:
    top = module.split(".")[0]
    if top in ALLOWED_THIRD_PARTY or top in sys.stdlib_module_names:
        return True
    return any(module == p or module.startswith(p + ".") for p in ALLOWED_PROJECT)


def test_stats_modules_import_only_numpy_scipy_and_stdlib() -> None:
    files = sorted(STATS_DIR.rglob("*.py"))
    assert files, "service/stats has no modules"
    offenders = [
        f"{path.relative_to(STATS_DIR.parent.parent)}:{line} imports {module}"
        for path in files
        for line, module in _imported_modules(path)
        if not _is_allowed(module)
    ]
    assert offenders == [], "service/stats must stay pure numpy/scipy:\n" + "\n".join(offenders)


def test_importing_stats_loads_no_web_or_database_stack() -> None:
    # A fresh interpreter, so nothing imported by other tests hides a leak.
    code = (
        "import sys, pkgutil, importlib, service.stats as s\n"
        "for m in pkgutil.walk_packages(s.__path__, 'service.stats.'):\n"
        "    importlib.import_module(m.name)\n"
        "bad = sorted({n.split('.')[0] for n in sys.modules} & "
        "{'fastapi', 'starlette', 'pydantic', 'sqlalchemy', 'alembic', 'httpx', 'pyarrow', "
        "'matplotlib'})\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"service.stats pulled in: {out.stdout.strip()}"
