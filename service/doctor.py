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


#: Share of ``maxmemory`` in use from which writes may soon be refused.
MEMORY_WARN = 0.9


def _pressure(r: redis.Redis) -> list[Finding]:
    """Faults that make writes impossible right now: memory limit reached, AOF not writable.

    With ``noeviction`` a full server refuses every write (trial results, leases), and a
    server that cannot write its append-only file (full disk) refuses them too or stops.
    """
    out: list[Finding] = []
    try:
        mem = r.info("memory")
        persistence = r.info("persistence")
    except redis.RedisError:
        return out
    limit, used = int(mem.get("maxmemory", 0) or 0), int(mem.get("used_memory", 0) or 0)
    if limit and used >= MEMORY_WARN * limit:
        out.append(
            Finding(
                PROBLEM,
                "memory",
                f"Redis uses {used / 2**20:.0f} MiB of its maxmemory {limit / 2**20:.0f} MiB: "
                "writes are or will soon be refused and running jobs stall; raise maxmemory "
                "or remove old jobs (tutti purge)",
            )
        )
    elif limit:
        out.append(Finding(OK, "memory", f"{used / limit:.0%} of maxmemory in use"))
    if str(persistence.get("aof_last_write_status", "ok")) != "ok":
        out.append(
            Finding(
                PROBLEM,
                "disk",
                "the append-only file could not be written (disk full?): writes are refused; "
                "free space on the server's disk; nothing acknowledged before is lost",
            )
        )
    return out


def diagnose(r: redis.Redis, url: str, *, embedded: bool = False) -> list[Finding]:
    """Run every check against a connected server."""
    info = r.info("server")
    out = [Finding(OK, "server", f"Redis {info.get('redis_version')} answers at {url}")]
    out.append(_persistence(r, embedded=embedded))
    eviction = _eviction(r)
    if eviction is not None:
        out.append(eviction)
    out.extend(_pressure(r))
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
