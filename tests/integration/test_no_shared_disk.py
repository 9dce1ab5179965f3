"""Three "machines" on this host that share nothing but a TCP connection to one Redis."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from sklearn.datasets import load_breast_cancer

from tests.conftest import QUICK_EXPLAIN, ROOT, RedisProcess

pytestmark = pytest.mark.integration


def _machine(base: Path, name: str) -> dict[str, str]:
    """An environment with its own HOME, TMPDIR, working directory and TUTTI_HOME."""
    home = base / name
    for sub in ("home", "tmp", "work", "tutti"):
        (home / sub).mkdir(parents=True)
    env = {k: v for k, v in os.environ.items() if not k.startswith("TUTTI_")}
    env.update(
        HOME=str(home / "home"),
        TMPDIR=str(home / "tmp"),
        TUTTI_HOME=str(home / "tutti"),
        PYTHONPATH=str(ROOT),
        TUTTI_SHARD_SECONDS="10",
        **QUICK_EXPLAIN,
    )
    return env


def test_workers_and_client_share_only_a_tcp_redis(tmp_path: Path) -> None:
    server = RedisProcess(tmp_path / "redis", password="pw-for-test")
    server.dir.mkdir()
    server.start()
    url = server.url
    prefix = "nsd"
    try:
        client_env = _machine(tmp_path, "client")
        csv = Path(client_env["HOME"]) / "data" / "cells.csv"
        csv.parent.mkdir()
        load_breast_cancer(as_frame=True).frame.to_csv(csv, index=False)
        submit = subprocess.run(
            [
                sys.executable,
                "-m",
                "tuttiml.service.cli",
                "--redis-url",
                url,
                "--prefix",
                prefix,
                "submit",
                str(csv),
                "--target",
                "target",
                "--max-trials",
                "8",
                "--parallelism",
                "2",
                "--families",
                "boosting,single",
                "--metric",
                "accuracy",
            ],
            env=client_env,
            cwd=Path(client_env["HOME"]).parent / "work",
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert submit.returncode == 0, submit.stderr
        job_id = submit.stdout.strip().splitlines()[-1]
        workers = []
        for name in ("machine-a", "machine-b"):
            env = _machine(tmp_path, name)
            env["TUTTI_REDIS_URL"] = url  # the only thing the machines share
            assert not Path(env["HOME"], "data", "cells.csv").exists()
            workers.append(
                subprocess.Popen(
                    [
                        sys.executable,
                        "-m",
                        "tuttiml.service.cli",
                        "--prefix",
                        prefix,
                        "start-workers",
                        "--processes",
                        "1",
                        "--exit-when-empty",
                    ],
                    env=env,
                    cwd=Path(env["HOME"]).parent / "work",
                    stdout=subprocess.DEVNULL,
                    stderr=subprocess.STDOUT,
                )
            )
        for w in workers:
            assert w.wait(timeout=600) == 0
        out = Path(client_env["HOME"]) / "model.skops"
        export = subprocess.run(
            [
                sys.executable,
                "-m",
                "tuttiml.service.cli",
                "--redis-url",
                url,
                "--prefix",
                prefix,
                "export",
                job_id,
                "-o",
                str(out),
            ],
            env=client_env,
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert export.returncode == 0, export.stderr
        assert out.exists() and Path(str(out) + ".json").exists()
        status = subprocess.run(
            [
                sys.executable,
                "-m",
                "tuttiml.service.cli",
                "--redis-url",
                url,
                "--prefix",
                prefix,
                "status",
                job_id,
                "--json",
            ],
            env=client_env,
            capture_output=True,
            text=True,
            timeout=60,
        )
        assert '"state": "finished"' in status.stdout
        # no embedded server was started on any machine: they all used the TCP server
        for name in ("client", "machine-a", "machine-b"):
            assert not (tmp_path / name / "tutti" / "redis.sock").exists()
    finally:
        server.kill()
