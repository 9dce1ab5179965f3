"""Settings built once from environment variables and passed down explicitly."""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from pathlib import Path


def default_home() -> Path:
    """Per-user data directory for the embedded store (XDG convention)."""
    base = os.environ.get("XDG_DATA_HOME") or str(Path.home() / ".local" / "share")
    return Path(base) / "tutti"


def _env_float(name: str, default: float) -> float:
    """A non-negative number from the environment, or ``default`` when the variable is unset."""
    raw = os.environ.get(name)
    if raw in (None, ""):
        return default
    try:
        value = float(raw)
    except ValueError:
        value = float("nan")
    if not value >= 0:  # also refuses NaN
        raise ValueError(
            f"{name}={raw!r} is not a non-negative number; "
            f"set it to e.g. {default:.10g} or unset it"
        )
    return value


@dataclass(frozen=True)
class Settings:
    """Deployment settings shared by clients and workers.

    Attributes:
        redis_url: URL of the shared Redis; ``None`` means the embedded server under ``home``.
        prefix: every Redis key starts with this (so deployments can share a server).
        home: data directory of the embedded server (``TUTTI_HOME``).
        shard_seconds: length of one search slice before a shard re-enqueues itself.
        lease_seconds: expiry of a running trial's lease; a trial whose lease lapsed is reaped.
        max_upload_bytes: size cap of one uploaded table (encoded Parquet bytes).
        artifact_key: optional HMAC key that signs stored pipelines (``TUTTI_ARTIFACT_KEY``).
        explain_min_seconds: the floor of the default explanation time
            (``TUTTI_EXPLAIN_MIN_SECONDS``); the explanations run after the model is committed,
            for the spec's ``explain_seconds`` or else a quarter of the search time within
            these bounds.
        explain_max_seconds: the cap of the default explanation time
            (``TUTTI_EXPLAIN_MAX_SECONDS``).
        stop_grace_seconds: after SIGTERM, how long a busy worker lets its trial reach the
            end of a fold (``TUTTI_STOP_GRACE_SECONDS``); then the trial process is killed,
            the trial failed and retried, and the worker exits in any case soon after.
    """

    redis_url: str | None = None
    prefix: str = "tutti"
    home: Path = field(default_factory=default_home)
    shard_seconds: float = 45.0
    lease_seconds: float = 20.0
    max_upload_bytes: int = 2 * 1024**3
    artifact_key: str | None = None
    explain_min_seconds: float = 30.0
    explain_max_seconds: float = 900.0
    stop_grace_seconds: float = 30.0

    @classmethod
    def from_env(cls, **overrides: object) -> Settings:
        """Read ``TUTTI_*`` variables; keyword overrides that are not ``None`` win."""
        settings = cls(
            redis_url=os.environ.get("TUTTI_REDIS_URL") or None,
            prefix=os.environ.get("TUTTI_PREFIX") or "tutti",
            home=Path(os.environ["TUTTI_HOME"])
            if os.environ.get("TUTTI_HOME")
            else default_home(),
            shard_seconds=_env_float("TUTTI_SHARD_SECONDS", cls.shard_seconds),
            lease_seconds=_env_float("TUTTI_LEASE_SECONDS", cls.lease_seconds),
            max_upload_bytes=int(_env_float("TUTTI_MAX_UPLOAD_BYTES", cls.max_upload_bytes)),
            artifact_key=os.environ.get("TUTTI_ARTIFACT_KEY") or None,
            explain_min_seconds=_env_float("TUTTI_EXPLAIN_MIN_SECONDS", cls.explain_min_seconds),
            explain_max_seconds=_env_float("TUTTI_EXPLAIN_MAX_SECONDS", cls.explain_max_seconds),
            stop_grace_seconds=_env_float("TUTTI_STOP_GRACE_SECONDS", cls.stop_grace_seconds),
        )
        given = {k: v for k, v in overrides.items() if v is not None}
        if "home" in given:
            given["home"] = Path(str(given["home"]))
        return replace(settings, **given)  # type: ignore[arg-type]
