"""Which server-side files a fit may read: only files inside the configured ``fit_data_dirs``.

The check covers every file the reader will open, not only the path given:

* the path given must be absolute, lexically inside an allowed directory (no ``..``), free
  of NUL bytes and encodable for the file system;
* it is resolved (``Path.resolve(strict=True)``: symlinks followed) and must still lie
  inside an allowed directory;
* a directory is walked here, at every depth (the reader never lists a directory itself):
  each sub-directory and each data file is resolved and must lie inside an allowed
  directory, and each file must be a regular file (no FIFO or device). A symlink that stays
  inside the allowed directories is followed; one that leads out is refused (403), however
  deep it sits. A directory reached twice through links is walked once (no cycles).
  Names beginning with ``.`` or ``_`` are skipped (pyarrow's convention: ``_SUCCESS``,
  ``.crc``).
* the reader gets the explicit list of resolved files (:class:`DataFiles`), in the sorted
  order of their paths inside the directory given.

What remains outside this check: a file replaced by a link between the check and the read
(the data directories are the operator's; they should not be writable by the clients of
the service), and hard links (indistinguishable from the file itself).

Errors never show an absolute server path, the target of a link nor the allowed
directories: a path inside an allowed directory is shown relative to it
(:attr:`DataFiles.shown`); a path outside every one is named only by what the client sent.
No file is opened before its check passes, so no error can carry an outside file's content.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from service.errors import DataError, PermissionDeniedError

__all__ = ["SETTING", "DataFiles", "allowed_path", "data_files", "files_under"]

SETTING = "fit_data_dirs"
_ENV = "RISKFIT_FIT_DATA_DIRS"
_HIDDEN = (".", "_")


@dataclass(frozen=True)
class DataFiles:
    """The files a fit reads: ``files`` resolved, in read order; ``shown`` for messages."""

    path: Path  # the resolved path given (a file or a directory)
    files: tuple[str, ...]
    shown: str  # the path given, relative to its allowed directory ("." for the directory)
    names: tuple[str, ...]  # each file relative to its allowed directory, as errors show it


def _clip(raw: str) -> str:
    return raw if len(raw) <= 300 else raw[:300] + "..."


def _refuse(shown: str, why: str, allowed: Sequence[str], value: str) -> PermissionDeniedError:
    return PermissionDeniedError(
        f"the server may not read {shown}: {why}",
        field="data.path",
        value=value,
        remedy=f"put the data in one of the {len(allowed)} directories an operator listed in "
        f"the setting {SETTING} (env {_ENV}), without links leading out of them"
        if allowed
        else f"an operator must list the directory in the setting {SETTING} "
        f"(env {_ENV}, a JSON list), or upload the file instead",
        details={"setting": SETTING},
    )


def _bad(message: str, value: str, remedy: str) -> DataError:
    return DataError(message, field="data.path", value=value, remedy=remedy)


def _inside(path: Path, roots: Sequence[Path]) -> Path | None:
    """The root ``path`` lies in (the first), or None."""
    for r in roots:
        if path == r or path.is_relative_to(r):
            return r
    return None


def _rel(path: Path, root: Path) -> str:
    rel = path.relative_to(root).as_posix()
    return rel or "."


def _check_text(raw: str) -> None:
    if "\x00" in raw:
        raise _bad(
            "data.path holds a NUL byte",
            _clip(raw.replace("\x00", "\\x00")),
            "send the path without NUL (\\u0000) characters",
        )
    try:
        os.fsencode(raw)
    except UnicodeError:
        raise _bad(
            "data.path holds characters the server's file system cannot name",
            _clip(raw.encode("utf-8", "backslashreplace").decode("ascii", "replace")),
            "send the path as valid UTF-8 text",
        ) from None


def data_files(raw: str, allowed: Sequence[str]) -> DataFiles:
    """The checked files behind ``raw`` (see the module docstring); 403/422 otherwise."""
    _check_text(raw)
    if not allowed:
        raise _refuse("that path", "server-side data paths are disabled", allowed, _clip(raw))
    given = Path(raw)
    if not given.is_absolute():
        raise _bad(
            "data.path must be absolute",
            _clip(raw),
            "give the full path as the server sees it, e.g. /data/segments.parquet",
        )
    roots = [Path(d).resolve() for d in allowed]
    lexical = [Path(os.path.abspath(d)) for d in allowed]  # as configured (may be a link)
    root = _inside(Path(*given.parts), [*lexical, *roots])
    if root is None or ".." in given.parts:
        raise _refuse("that path", "it is outside the allowed directories", allowed, _clip(raw))
    shown = _rel(Path(*given.parts), root)
    try:
        resolved = given.resolve(strict=True)
    except (RuntimeError, OSError, ValueError):
        raise _bad(
            f"no file or directory at {shown} (in an allowed data directory)",
            shown,
            "check the path as the server sees it",
        ) from None
    if _inside(resolved, roots) is None:
        raise _refuse(shown, "it links outside the allowed directories", allowed, shown)
    return _collect(resolved, shown, Path(*given.parts), root, roots, allowed)


def _collect(
    resolved: Path,
    shown: str,
    given: Path,
    root: Path,
    roots: Sequence[Path],
    allowed: Sequence[str],
) -> DataFiles:
    if not resolved.is_dir():
        if not resolved.is_file():
            raise _bad(f"{shown} is not a regular file", shown, "give a data file or directory")
        return DataFiles(resolved, (str(resolved),), shown, (shown,))
    found: list[tuple[str, str]] = []
    seen: set[Path] = set()
    for dirpath, dirnames, filenames in os.walk(resolved, followlinks=True):
        here = Path(dirpath)
        shown_dir = _rel(given / here.relative_to(resolved), root)
        real = here.resolve()
        if _inside(real, roots) is None:
            raise _refuse(shown_dir, "it links outside the allowed directories", allowed, shown)
        if real in seen:
            dirnames[:] = []
            continue
        seen.add(real)
        dirnames[:] = sorted(d for d in dirnames if not d.startswith(_HIDDEN))
        for name in filenames:
            if name.startswith(_HIDDEN):
                continue
            link = here / name
            name_shown = _rel(given / link.relative_to(resolved), root)
            try:
                target = link.resolve(strict=True)
            except (RuntimeError, OSError):
                raise _bad(
                    f"{name_shown} is a broken link", shown, "remove it or point it at data"
                ) from None
            if _inside(target, roots) is None:
                raise _refuse(
                    name_shown, "it links outside the allowed directories", allowed, shown
                )
            if not target.is_file():
                raise _bad(
                    f"{name_shown} is not a regular file",
                    shown,
                    "keep only data files in the directory",
                )
            found.append((name_shown, str(target)))
    if not found:
        raise _bad(
            f"the directory {shown} holds no data files",
            shown,
            "point at a Parquet file, a CSV file or a directory of them",
        )
    found.sort(key=lambda item: item[0])
    return DataFiles(resolved, tuple(f for _, f in found), shown, tuple(n for n, _ in found))


def files_under(path: str) -> DataFiles:
    """The data files of ``path`` with its own directory as the one allowed directory.

    For callers that read a path no client chose (tests, the command line's own files):
    the same walk and the same refusal of links leading out.
    """
    p = Path(path).resolve()
    parent = p if p.is_dir() else p.parent
    return data_files(str(p), [str(parent)])


def allowed_path(raw: str, allowed: Sequence[str]) -> Path:
    """The resolved path of ``raw`` if the server may read it and every file below it."""
    return data_files(raw, allowed).path
