"""What the `tutti` command says when the reader, the server or the workers are gone."""

from __future__ import annotations

import os
import queue
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.service.client import Client
from tuttiml.service.errors import StoreUnavailableError

from tests.conftest import ROOT, start_workers
from tests.redis_process import free_port

pytestmark = pytest.mark.integration


def _tutti(*args: str) -> list[str]:
    return [sys.executable, "-m", "tuttiml.service.cli", *args]


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def test_a_reader_that_closes_the_pipe_ends_the_command_quietly(
    redis_url: str, prefix: str
) -> None:
    # `tutti … --json | head`: the reader is gone before the command writes
    proc = subprocess.Popen(
        _tutti("--redis-url", redis_url, "--prefix", prefix, "status", "--json"),
        cwd=ROOT,
        env=_env(),
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    assert proc.stdout is not None
    proc.stdout.close()
    _, err = proc.communicate(timeout=120)
    assert err.decode() == ""  # no "cannot reach Redis (Broken pipe)", no traceback
    assert proc.returncode == 141  # 128 + SIGPIPE, as a shell reports for `yes | head`


def test_an_unreachable_server_is_named_within_seconds(tmp_path: Path) -> None:
    dead = f"redis://127.0.0.1:{free_port()}/0"  # nothing listens there
    t0 = time.monotonic()
    res = subprocess.run(
        _tutti("--redis-url", dead, "status"),
        cwd=ROOT,
        env=_env(),
        capture_output=True,
        text=True,
        timeout=60,  # the old code retried for about 90 s
    )
    took = time.monotonic() - t0
    assert res.returncode == 2, res.stderr
    assert f"cannot reach Redis at {dead}" in res.stderr
    assert "TUTTI_REDIS_URL / --redis-url" in res.stderr and "tutti doctor" in res.stderr
    assert "Traceback" not in res.stderr
    assert took < 30, took  # a few seconds here; the margin is for a loaded machine
    with pytest.raises(StoreUnavailableError, match="cannot reach Redis at") as caught:
        Client(url=dead)
    assert caught.value.field == "redis_url"


def _lines(stream: object, out: queue.Queue[tuple[float, str]]) -> None:
    for raw in stream:  # type: ignore[attr-defined]
        out.put((time.monotonic(), raw.decode(errors="replace")))


def _until(lines: queue.Queue[tuple[float, str]], text: str, limit: float) -> tuple[float, str]:
    end, seen = time.monotonic() + limit, []
    while time.monotonic() < end:
        try:
            at, line = lines.get(timeout=0.5)
        except queue.Empty:
            continue
        seen.append(line)
        if text in line:
            return at, line
    raise AssertionError(f"{text!r} not seen within {limit} s; got {''.join(seen)[-2000:]}")


def test_waiting_without_workers_says_so_and_a_cancelled_job_exits_nonzero(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    csv = tmp_path / "cancer.csv"
    load_breast_cancer(as_frame=True).frame.iloc[:, [0, 1, 2, 30]].to_csv(csv, index=False)
    spec = ["--target", "target", "--max-trials", "2", "--families", "boosting", "--wait"]
    proc = subprocess.Popen(
        _tutti("--redis-url", redis_url, "--prefix", prefix, "submit", str(csv), *spec),
        cwd=ROOT,
        env=_env(),
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    err: queue.Queue[tuple[float, str]] = queue.Queue()
    out: queue.Queue[tuple[float, str]] = queue.Queue()
    threading.Thread(target=_lines, args=(proc.stderr, err), daemon=True).start()
    threading.Thread(target=_lines, args=(proc.stdout, out), daemon=True).start()
    workers = None
    try:
        submitted_at, job_id = out.get(timeout=120)
        _, line = _until(err, "no worker is alive", 15.0)  # within 15 s of the submit
        assert "start-workers --processes" in line and prefix in line
        assert client.job(job_id.strip()).cancel()
        workers = start_workers(redis_url, prefix, 1, log=tmp_path / "workers.log")
        _until(err, "ended cancelled", 120.0)
        assert proc.wait(timeout=60) == 1  # scripts see that the job did not finish
    finally:
        if proc.poll() is None:
            proc.kill()
        if workers is not None:
            workers.wait(timeout=120)
    assert submitted_at > 0
