"""One way to get a Redis client: the configured URL or the embedded server, with retries."""

from __future__ import annotations

from urllib.parse import urlparse

import redis
from redis.backoff import ExponentialBackoff
from redis.retry import Retry
from tuttiml.service.config import Settings
from tuttiml.service.errors import StoreUnavailableError
from tuttiml.service.server import EmbeddedServer

#: Enough retries to ride out a Redis restart of about a minute (backoff capped at 2 s).
RETRIES = 45
#: How long a client waits for a first answer before it says the server is unreachable.
PROBE_SECONDS = 3.0


def resolve_url(settings: Settings) -> str:
    """The Redis URL to use: the configured one, or the embedded server's (started if needed)."""
    if settings.redis_url:
        return settings.redis_url
    return EmbeddedServer(settings.home).ensure_running()


def masked_url(url: str) -> str:
    """``url`` with its password (if any) replaced by ``***``, for messages."""
    parsed = urlparse(url)
    if parsed.password:
        return url.replace(f":{parsed.password}@", ":***@")
    return url


def unreachable(url: str, exc: BaseException) -> StoreUnavailableError:
    """The error for a Redis server that does not answer: its URL and what to do."""
    return StoreUnavailableError(
        f"cannot reach Redis at {masked_url(url)} ({exc}); start that server, or point "
        "TUTTI_REDIS_URL / --redis-url at one that runs (with neither set, tutti uses its "
        "embedded server: `tutti server start`); `tutti doctor` checks the connection.",
        field="redis_url",
        value=masked_url(url),
    )


def _check_auth(url: str, *, require_up: bool = False) -> None:
    """Fail fast (no retries) when the server refuses our password, or (``require_up``)
    does not answer at all."""
    probe = redis.Redis.from_url(url, socket_connect_timeout=PROBE_SECONDS, protocol=2)
    try:
        probe.ping()
    except redis.AuthenticationError as exc:
        raise StoreUnavailableError(
            f"cannot authenticate to {masked_url(url)}: wrong or missing password; check "
            "TUTTI_REDIS_URL / --redis-url (redis://:PASSWORD@host:port/0).",
            field="redis_url",
            value=masked_url(url),
        ) from exc
    except redis.ResponseError as exc:
        if "NOAUTH" in str(exc) or "WRONGPASS" in str(exc):
            raise StoreUnavailableError(
                f"cannot authenticate to {masked_url(url)}: {exc}; put the password in the URL.",
                field="redis_url",
                value=masked_url(url),
            ) from exc
    except (redis.ConnectionError, redis.TimeoutError) as exc:
        if require_up:
            raise unreachable(url, exc) from exc
        # not up yet: the retrying client below waits for it
    finally:
        probe.close()


def connect(url: str, *, retries: int = RETRIES, require_up: bool = False) -> redis.Redis:
    """A client that reconnects with exponential backoff when the server goes away.

    Responses stay bytes (RQ needs that); the store decodes what it reads. Workers wait for
    a server that is not up yet; clients pass ``require_up`` to hear at once that it is not.

    Raises:
        StoreUnavailableError: the server refuses the password, or (``require_up``) does not
            answer within ``PROBE_SECONDS`` (neither is retried).
    """
    _check_auth(url, require_up=require_up)
    retry = Retry(ExponentialBackoff(cap=2.0, base=0.05), retries)
    return redis.Redis.from_url(
        url,
        retry=retry,
        retry_on_error=[redis.ConnectionError, redis.TimeoutError, ConnectionRefusedError],
        health_check_interval=30,
        socket_connect_timeout=5,
        protocol=2,
    )
