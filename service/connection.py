"""One way to get a Redis client: the configured URL or the embedded server, with retries."""

from __future__ import annotations

import redis
from redis.backoff import ExponentialBackoff
from redis.retry import Retry

from service.config import Settings
from service.server import EmbeddedServer

#: Enough retries to ride out a Redis restart of about a minute (backoff capped at 2 s).
RETRIES = 45


def resolve_url(settings: Settings) -> str:
    """The Redis URL to use: the configured one, or the embedded server's (started if needed)."""
    if settings.redis_url:
        return settings.redis_url
    return EmbeddedServer(settings.home).ensure_running()


def connect(url: str, *, retries: int = RETRIES) -> redis.Redis:
    """A client that reconnects with exponential backoff when the server goes away.

    Responses stay bytes (RQ needs that); the store decodes what it reads.
    """
    retry = Retry(ExponentialBackoff(cap=2.0, base=0.05), retries)
    return redis.Redis.from_url(
        url,
        retry=retry,
        retry_on_error=[redis.ConnectionError, redis.TimeoutError, ConnectionRefusedError],
        health_check_interval=30,
        socket_connect_timeout=5,
        protocol=2,
    )
