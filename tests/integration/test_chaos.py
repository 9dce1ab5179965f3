"""The short chaos soak: a few faults of different kinds while jobs run, then every invariant.

The full soak is ``benchmarks/chaos.py`` (run by hand: >= 40 jobs, >= 60 faults); this runs the
same code with two small jobs and three faults (worker SIGKILL, Redis SIGKILL and restart, a
dropped link through the loopback relay), on 4 worker processes in 3 environments that share
only a TCP connection to Redis, one of them with its clock 37 s ahead.
"""

from __future__ import annotations

import importlib
import sys

import pytest

from tests.conftest import ROOT

pytestmark = [pytest.mark.integration, pytest.mark.slow]


def test_short_chaos_soak_keeps_every_invariant() -> None:
    sys.path.insert(0, str(ROOT / "benchmarks"))
    try:
        chaos = importlib.import_module("chaos")
    finally:
        sys.path.remove(str(ROOT / "benchmarks"))
    figures = chaos.main(
        [
            "--seed",
            "3",
            "--jobs",
            "2",
            "--shapes",
            "tiny,holdout",
            "--faults",
            "3",
            "--kinds",
            "worker_kill,redis_kill,link_drop",
            "--drop",
            "5",
            "10",
            "--minutes",
            "2.5",
        ]
    )
    print("FIGURE chaos_short", figures)
    assert figures["jobs"] == 2 and figures["faults_not_fired"] == 0
    assert figures["faults_by_kind"] == {"worker_kill": 1, "redis_kill": 1, "link_drop": 1}
    assert figures["problems"] == {}
    assert figures["launcher_exits_unasked"] == 0  # no worker group died on its own
    assert figures["sigterm_exit_seconds_max"] < 30  # SIGTERM ends every group (bounded)
