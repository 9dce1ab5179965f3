"""``tutti doctor``: check the Redis server a deployment points at and say what to change."""

from __future__ import annotations

import ipaddress
from dataclasses import dataclass
from typing import Any
from urllib.parse import urlparse

import redis

OK, ADVICE, PROBLEM = "ok", "advice", "problem"


@dataclass(frozen=True)
class Finding:
    """One check: its level (ok / advice / problem), what was seen and what to do."""

    level: str
    check: str
    detail: str


def _config(r: redis.Redis, name: str) -> str | None:
    try:
        got: Any = r.config_get(name)
    except redis.ResponseError:
        return None  # CONFIG disabled (managed services)
    value = got.get(name) if isinstance(got, dict) else None
    if value is None and isinstance(got, dict):
        value = got.get(name.encode())
    return value.decode() if isinstance(value, bytes) else value


def _loopback(url: str) -> bool:
    parsed = urlparse(url)
    if parsed.scheme == "unix" or not parsed.hostname:
        return True
    if parsed.hostname == "localhost":
        return True
    try:
        return ipaddress.ip_address(parsed.hostname).is_loopback
    except ValueError:
        return False


def diagnose(r: redis.Redis, url: str, *, embedded: bool = False) -> list[Finding]:
    """Run every check against a connected server."""
    out: list[Finding] = []
    info = r.info("server")
    out.append(Finding(OK, "server", f"Redis {info.get('redis_version')} answers at {url}"))
    aof = _config(r, "appendonly")
    save = _config(r, "save")
    fsync = _config(r, "appendfsync")
    if aof is None:
        out.append(
            Finding(
                ADVICE,
                "persistence",
                "CONFIG is not available; make sure the server persists data (appendonly yes)",
            )
        )
    elif aof == "yes":
        if fsync == "always":
            out.append(Finding(OK, "persistence", "append-only file, fsync on every write"))
        elif fsync == "everysec":
            out.append(
                Finding(
                    OK if not embedded else ADVICE,
                    "persistence",
                    "append-only file with appendfsync everysec: a crash of the "
                    "server can lose up to ~1 s of writes (use 'always' to lose none)",
                )
            )
        else:
            out.append(
                Finding(
                    PROBLEM,
                    "persistence",
                    f"appendfsync {fsync}: the OS decides "
                    "when writes reach disk; set appendfsync everysec or always",
                )
            )
    elif save:
        out.append(
            Finding(
                PROBLEM,
                "persistence",
                f"only RDB snapshots ({save}): a crash loses "
                "everything since the last snapshot; set appendonly yes",
            )
        )
    else:
        out.append(
            Finding(
                PROBLEM,
                "persistence",
                "no persistence: a restart loses every job; "
                "set appendonly yes and appendfsync everysec (or always)",
            )
        )
    policy = _config(r, "maxmemory-policy")
    if policy is not None:
        if policy == "noeviction":
            out.append(Finding(OK, "eviction", "maxmemory-policy noeviction"))
        else:
            out.append(
                Finding(
                    PROBLEM,
                    "eviction",
                    f"maxmemory-policy {policy} can drop tutti's "
                    "keys (trial leases, results); set maxmemory-policy noeviction",
                )
            )
    parsed = urlparse(url)
    if not _loopback(url) and not parsed.password:
        out.append(
            Finding(
                PROBLEM,
                "password",
                "the server is reached over the network "
                "without a password: set requirepass and use "
                "redis://:PASSWORD@host:port/0 (or rediss:// for TLS)",
            )
        )
    elif not _loopback(url) and parsed.scheme != "rediss":
        out.append(
            Finding(
                ADVICE,
                "tls",
                "password sent in clear text over the network; use "
                "rediss:// if the network is not trusted",
            )
        )
    else:
        out.append(Finding(OK, "access", "loopback/unix socket or password set"))
    return out
