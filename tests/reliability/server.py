"""A real uvicorn process serving the app on a free loopback port, for fault tests."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx

STARTUP_TIMEOUT_S = 30.0


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


class ServerProcess:
    """``uvicorn app.main:create_app --factory`` with the given SPATLINE_* settings."""

    def __init__(
        self,
        *,
        database_url: str,
        log_path: Path,
        port: int | None = None,
        extra_env: dict[str, str] | None = None,
    ) -> None:
        self.port = port or free_port()
        self.base_url = f"http://127.0.0.1:{self.port}"
        self.log_path = log_path
        self.env = {
            **os.environ,
            "SPATLINE_ENVIRONMENT": "test",
            "SPATLINE_SECRET_KEY": "reliability-test-secret-0123456789",
            "SPATLINE_DATABASE_URL": database_url,
            "SPATLINE_RUN_WORKER_IN_SERVE": "false",
            **(extra_env or {}),
        }
        self.process: subprocess.Popen[bytes] | None = None

    def start(self) -> None:
        log = self.log_path.open("ab")
        self.process = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "uvicorn",
                "app.main:create_app",
                "--factory",
                "--host",
                "127.0.0.1",
                "--port",
                str(self.port),
                "--log-level",
                "info",
            ],
            env=self.env,
            stdout=log,
            stderr=subprocess.STDOUT,
            cwd=Path(__file__).resolve().parents[2],
        )
        log.close()
        self.wait_ready()

    def wait_ready(self) -> None:
        deadline = time.monotonic() + STARTUP_TIMEOUT_S
        while time.monotonic() < deadline:
            assert self.process is not None
            if self.process.poll() is not None:
                raise RuntimeError(f"uvicorn exited: {self.log_path.read_text()[-2000:]}")
            try:
                if httpx.get(f"{self.base_url}/healthz", timeout=1.0).status_code == 200:
                    return
            except httpx.HTTPError:
                pass
            time.sleep(0.1)
        raise RuntimeError(f"uvicorn did not answer in {STARTUP_TIMEOUT_S} s")

    def kill(self) -> None:
        """SIGKILL: no shutdown, no flush, no goodbye."""
        if self.process is not None and self.process.poll() is None:
            self.process.send_signal(signal.SIGKILL)
            self.process.wait(timeout=10)

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.kill()

    def log_text(self) -> str:
        return self.log_path.read_text(errors="replace")
