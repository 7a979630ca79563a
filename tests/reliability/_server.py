"""A live ``riskfit serve`` subprocess on 127.0.0.1 for crash, load and multi-process tests.

:class:`ServerProcess` starts ``riskfit serve --host 127.0.0.1 --port P
--database-url URL`` with ``RISKFIT_*`` settings in its environment, waits until ``/readyz``
answers 200, and stops it either gently (SIGTERM) or by ``kill -9`` (SIGKILL, no clean-up
runs: the crash the store must survive). Its stderr goes to a log file in the test's
``tmp_path`` so a failed start shows why.

Access control: these tests are about durability, not roles, so :func:`auth_env` turns API-key
checks off through the documented setting ``RISKFIT_AUTH_REQUIRED=false`` (what
``riskfit serve --no-auth`` sets); the server still binds to 127.0.0.1 only.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Mapping
from pathlib import Path
from types import TracebackType

import httpx

__all__ = ["ServerProcess", "auth_env", "free_port", "riskfit_cli"]

LOCALHOST = "127.0.0.1"
READY_TIMEOUT_S = 60.0
#: ``riskfit ARGS`` with this interpreter (the console script's entry point, no PATH lookup).
RISKFIT = [sys.executable, "-c", "import sys; from service.cli import main; sys.exit(main())"]


def free_port() -> int:
    """A port nothing listens on right now on 127.0.0.1 (the OS picks it)."""
    with socket.socket() as s:
        s.bind((LOCALHOST, 0))
        port: int = s.getsockname()[1]
        return port


def auth_env() -> dict[str, str]:
    """Environment that turns API-key checks off for a local test server."""
    return {"RISKFIT_AUTH_REQUIRED": "false"}


def _env(database_url: str, extra: Mapping[str, str] | None) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("RISKFIT_")}
    env.update(auth_env())
    env["RISKFIT_DATABASE_URL"] = database_url
    env.update(extra or {})
    env.setdefault("PYTHONUNBUFFERED", "1")
    return env


def riskfit_cli(
    *args: str, database_url: str, env: Mapping[str, str] | None = None, timeout: float = 120.0
) -> subprocess.CompletedProcess[str]:
    """Run ``riskfit ARGS`` against ``database_url``; output captured as text."""
    return subprocess.run(
        [*RISKFIT, *args],
        env=_env(database_url, env),
        capture_output=True,
        text=True,
        timeout=timeout,
        check=False,
    )


class ServerProcess:
    """One ``riskfit serve`` process; use as a context manager or call start()/stop()."""

    def __init__(
        self,
        database_url: str,
        log_dir: Path,
        *,
        env: Mapping[str, str] | None = None,
        name: str = "server",
        command: list[str] | None = None,
    ) -> None:
        self.database_url = database_url
        self.extra_env = dict(env or {})
        self.log_path = log_dir / f"{name}.log"
        self.port = 0
        self.proc: subprocess.Popen[bytes] | None = None
        self.starts = 0
        self.command = command  # argv with "{port}" for the port; default: riskfit serve

    @property
    def base_url(self) -> str:
        return f"http://{LOCALHOST}:{self.port}"

    def start(self) -> ServerProcess:
        """Start on a new free port and wait for ``/readyz`` (raises with the log on failure)."""
        self.port = free_port()
        self.starts += 1
        with self.log_path.open("ab") as log:
            log.write(f"--- start {self.starts} on port {self.port}\n".encode())
            log.flush()
            self.proc = subprocess.Popen(
                [a.replace("{port}", str(self.port)) for a in self.command or self._serve()],
                env=_env(self.database_url, self.extra_env),
                stdout=log,
                stderr=subprocess.STDOUT,
            )
        self._wait_ready()
        return self

    def _serve(self) -> list[str]:
        return [
            *RISKFIT,
            "serve",
            "--host",
            LOCALHOST,
            "--port",
            "{port}",
            "--database-url",
            self.database_url,
            "--log-level",
            "warning",
        ]

    def _wait_ready(self) -> None:
        deadline = time.monotonic() + READY_TIMEOUT_S
        assert self.proc is not None
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited with {self.proc.returncode}: {self.log()}")
            try:
                if httpx.get(f"{self.base_url}/readyz", timeout=2.0).status_code == 200:
                    return
            except httpx.TransportError:
                pass
            time.sleep(0.1)
        self.kill()
        raise RuntimeError(f"server not ready within {READY_TIMEOUT_S} s: {self.log()}")

    def log(self) -> str:
        return self.log_path.read_text(errors="replace")[-4000:] if self.log_path.exists() else ""

    def kill(self) -> None:
        """``kill -9``: the process gets no chance to clean up."""
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
            self.proc.wait(timeout=30)

    def stop(self) -> None:
        """SIGTERM (uvicorn's graceful shutdown), SIGKILL if it lingers."""
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.kill()

    def __enter__(self) -> ServerProcess:
        return self.start()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()
