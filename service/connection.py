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


def resolve_url(settings: Settings) -> str:
    """The Redis URL to use: the configured one, or the embedded server's (started if needed)."""
    if settings.redis_url:
        return settings.redis_url
    return EmbeddedServer(settings.home).ensure_running()


def _masked(url: str) -> str:
    parsed = urlparse(url)
    if parsed.password:
        return url.replace(f":{parsed.password}@", ":***@")
    return url


def _check_auth(url: str) -> None:
    """Fail fast (no retries) when the server refuses our password."""
    probe = redis.Redis.from_url(url, socket_connect_timeout=5, protocol=2)
    try:
        probe.ping()
    except redis.AuthenticationError as exc:
        raise StoreUnavailableError(
            f"cannot authenticate to {_masked(url)}: wrong or missing password; check "
            "TUTTI_REDIS_URL / --redis-url (redis://:PASSWORD@host:port/0).",
            field="redis_url",
            value=_masked(url),
        ) from exc
    except redis.ResponseError as exc:
        if "NOAUTH" in str(exc) or "WRONGPASS" in str(exc):
            raise StoreUnavailableError(
                f"cannot authenticate to {_masked(url)}: {exc}; put the password in the URL.",
                field="redis_url",
                value=_masked(url),
            ) from exc
    except redis.ConnectionError:
        pass  # not up yet: the retrying client below waits for it
    finally:
        probe.close()


def connect(url: str, *, retries: int = RETRIES) -> redis.Redis:
    """A client that reconnects with exponential backoff when the server goes away.

    Responses stay bytes (RQ needs that); the store decodes what it reads.

    Raises:
        StoreUnavailableError: the server refuses the password (not retried).
    """
    _check_auth(url)
    retry = Retry(ExponentialBackoff(cap=2.0, base=0.05), retries)
    return redis.Redis.from_url(
        url,
        retry=retry,
        retry_on_error=[redis.ConnectionError, redis.TimeoutError, ConnectionRefusedError],
        health_check_interval=30,
        socket_connect_timeout=5,
        protocol=2,
    )
