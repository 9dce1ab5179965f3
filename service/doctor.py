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
    info = r.info("server")
    out = [Finding(OK, "server", f"Redis {info.get('redis_version')} answers at {url}")]
    out.append(_persistence(r, embedded=embedded))
    eviction = _eviction(r)
    if eviction is not None:
        out.append(eviction)
    out.append(_access(url))
    return out


def _persistence(r: redis.Redis, *, embedded: bool) -> Finding:
    """Whether an acknowledged write survives a crash of the server."""
    aof, save, fsync = (_config(r, k) for k in ("appendonly", "save", "appendfsync"))
    if aof is None:
        return Finding(
            ADVICE,
            "persistence",
            "CONFIG is not available; make sure the server persists data (appendonly yes)",
        )
    if aof == "yes":
        if fsync == "always":
            return Finding(OK, "persistence", "append-only file, fsync on every write")
        if fsync == "everysec":
            return Finding(
                OK if not embedded else ADVICE,
                "persistence",
                "append-only file with appendfsync everysec: a crash of the "
                "server can lose up to ~1 s of writes (use 'always' to lose none)",
            )
        return Finding(
            PROBLEM,
            "persistence",
            f"appendfsync {fsync}: the OS decides "
            "when writes reach disk; set appendfsync everysec or always",
        )
    if save:
        return Finding(
            PROBLEM,
            "persistence",
            f"only RDB snapshots ({save}): a crash loses "
            "everything since the last snapshot; set appendonly yes",
        )
    return Finding(
        PROBLEM,
        "persistence",
        "no persistence: a restart loses every job; "
        "set appendonly yes and appendfsync everysec (or always)",
    )


def _eviction(r: redis.Redis) -> Finding | None:
    """Whether the server may drop tutti's keys when memory runs short (None: unknown)."""
    policy = _config(r, "maxmemory-policy")
    if policy is None:
        return None
    if policy == "noeviction":
        return Finding(OK, "eviction", "maxmemory-policy noeviction")
    return Finding(
        PROBLEM,
        "eviction",
        f"maxmemory-policy {policy} can drop tutti's "
        "keys (trial leases, results); set maxmemory-policy noeviction",
    )


def _access(url: str) -> Finding:
    """Whether the server is reached safely (loopback, or a password and TLS)."""
    parsed = urlparse(url)
    if not _loopback(url) and not parsed.password:
        return Finding(
            PROBLEM,
            "password",
            "the server is reached over the network "
            "without a password: set requirepass and use "
            "redis://:PASSWORD@host:port/0 (or rediss:// for TLS)",
        )
    if not _loopback(url) and parsed.scheme != "rediss":
        return Finding(
            ADVICE,
            "tls",
            "password sent in clear text over the network; use "
            "rediss:// if the network is not trusted",
        )
    return Finding(OK, "access", "loopback/unix socket or password set")
