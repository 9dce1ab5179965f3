# ruff: noqa: E402  (thread limits must be set before any numeric library is imported)
"""Shared pieces of the benchmark scripts: thread limits, a private Redis, worker processes.

Import this module first: it pins every thread pool to one thread before numpy, scikit-learn
or LightGBM are imported (one thread per fit, as the workers do).
"""

from __future__ import annotations

import os

for _var in (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
):
    os.environ[_var] = "1"

import atexit
import contextlib
import math
import secrets
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator, Sequence
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))


# one Redis launcher for tests and benchmarks (free_port is re-exported for the scripts)
from tests.redis_process import RedisProcess as RedisServer
from tests.redis_process import free_port  # noqa: F401


@contextlib.contextmanager
def private_redis() -> Iterator[RedisServer]:
    """A fresh Redis server in a temporary directory, stopped and removed on exit."""
    with tempfile.TemporaryDirectory(prefix="tutti-bench-") as d:
        server = RedisServer(Path(d)).start()
        try:
            yield server
        finally:
            server.stop()


def new_prefix() -> str:
    return f"bench{secrets.token_hex(3)}"


#: Worker launchers still running; stopped when the benchmark exits or is terminated, so a
#: killed benchmark leaves no worker processes behind.
_LIVE: list[Workers] = []


def _stop_live() -> None:
    for w in list(_LIVE):
        with contextlib.suppress(Exception):
            w.stop(grace=5.0)


def _on_term(signum: int, _frame: object) -> None:
    raise SystemExit(128 + signum)  # unwinds context managers, then atexit stops the rest


atexit.register(_stop_live)
with contextlib.suppress(ValueError):  # not the main thread: leave signals alone
    signal.signal(signal.SIGTERM, _on_term)


class Workers:
    """``python -m tuttiml.workers --processes N`` in its own session, stopped by group id.

    Args:
        url: Redis URL.
        prefix: key prefix.
        processes: worker processes.
        burst: exit once no job is left (``--exit-when-empty``).
        log: file for the workers' output (``None`` discards it).
    """

    def __init__(
        self,
        url: str,
        prefix: str,
        processes: int,
        *,
        burst: bool = True,
        log: Path | None = None,
    ) -> None:
        cmd = [
            sys.executable,
            "-m",
            "tuttiml.workers",
            "--processes",
            str(processes),
            "--redis-url",
            url,
            "--prefix",
            prefix,
        ]
        if burst:
            cmd.append("--exit-when-empty")
        env = {**os.environ, "PYTHONPATH": str(ROOT)}
        out = open(log, "ab") if log else subprocess.DEVNULL  # noqa: SIM115
        self.started = time.time()
        self.proc = subprocess.Popen(
            cmd,
            env=env,
            cwd=str(ROOT),
            stdout=out,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        if log:
            out.close()
        _LIVE.append(self)

    def wait(self, timeout: float) -> int | None:
        try:
            return self.proc.wait(timeout)
        except subprocess.TimeoutExpired:
            return None

    def stop(self, grace: float = 30.0) -> None:
        """SIGTERM the launcher (it forwards to its workers); SIGKILL the group if it hangs."""
        if self in _LIVE:
            _LIVE.remove(self)
        if self.proc.poll() is not None:
            return
        with contextlib.suppress(ProcessLookupError):
            self.proc.send_signal(signal.SIGTERM)
        if self.wait(grace) is None:
            # the group id is the launcher's pid (start_new_session): only our own processes
            with contextlib.suppress(ProcessLookupError):
                os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(10)

    def __enter__(self) -> Workers:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def mean_se(values: Sequence[float]) -> tuple[float, float]:
    """Mean and standard error of the mean (0 for a single value)."""
    vals = [float(v) for v in values]
    n = len(vals)
    if n == 0:
        return math.nan, math.nan
    m = sum(vals) / n
    if n < 2:
        return m, 0.0
    var = sum((v - m) ** 2 for v in vals) / (n - 1)
    return m, math.sqrt(var / n)


def print_table(headers: Sequence[str], rows: Sequence[Sequence[object]]) -> None:
    """A plain fixed-width table (Markdown-compatible, so it can be pasted into the README)."""
    cells = [[str(h) for h in headers]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]

    def line(r: Sequence[str]) -> str:
        return "| " + " | ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)) + " |"

    print(line(cells[0]))
    print("|" + "|".join("-" * (w + 2) for w in widths) + "|")
    for r in cells[1:]:
        print(line(r))
    sys.stdout.flush()
