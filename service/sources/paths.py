"""Which server-side paths a fit may read: only inside the configured ``fit_data_dirs``.

A path is resolved (``Path.resolve(strict=True)``: symlinks followed, ``..`` removed) and must
lie inside one of the resolved allowed directories; for a directory, every entry must resolve
inside as well (a symlink in an allowed directory that points elsewhere is refused). With no
directory configured (the default) server-side paths are disabled. Refusals are
:class:`~service.errors.PermissionDeniedError` (403) naming the path and the setting.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from service.errors import DataError, PermissionDeniedError

__all__ = ["SETTING", "allowed_path"]

SETTING = "fit_data_dirs"
_ENV = "RISKFIT_FIT_DATA_DIRS"


def _refuse(raw: str, why: str, allowed: Sequence[str]) -> PermissionDeniedError:
    return PermissionDeniedError(
        f"the server may not read {raw}: {why}",
        field="data.path",
        value=raw,
        remedy=f"put the data under one of {list(allowed)} (setting {SETTING}, env {_ENV})"
        if allowed
        else f"an operator must list the directory in the setting {SETTING} "
        f"(env {_ENV}, a JSON list), or upload the file instead",
        details={"setting": SETTING, "allowed": list(allowed)},
    )


def _inside(path: Path, roots: list[Path]) -> bool:
    return any(path == r or path.is_relative_to(r) for r in roots)


def allowed_path(raw: str, allowed: Sequence[str]) -> Path:
    """The resolved path of ``raw`` if the server may read it (see the module docstring)."""
    if not allowed:
        raise _refuse(raw, "server-side data paths are disabled", allowed)
    given = Path(raw)
    if not given.is_absolute():
        raise DataError(
            f"data.path must be absolute, got {raw}",
            field="data.path",
            value=raw,
            remedy="give the full path as the server sees it, e.g. /data/segments.parquet",
        )
    roots = [Path(d).resolve() for d in allowed]
    if not _inside(Path(*given.parts), roots) or ".." in given.parts:
        raise _refuse(raw, "it is outside the allowed directories", allowed)
    try:
        resolved = given.resolve(strict=True)
    except (FileNotFoundError, RuntimeError, OSError):
        raise DataError(
            f"no file or directory at {raw}",
            field="data.path",
            value=raw,
            remedy="check the path as the server sees it",
        ) from None
    if not _inside(resolved, roots):
        raise _refuse(raw, f"it resolves to {resolved}, outside the allowed directories", allowed)
    if resolved.is_dir():
        for entry in resolved.iterdir():
            if not _inside(entry.resolve(), roots):
                raise _refuse(raw, f"{entry.name} links outside the allowed directories", allowed)
    return resolved
