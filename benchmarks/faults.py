"""Fault figures: runs the fault-injection tests and prints what they measured.

Faults injected and survived, trials lost (must be 0), jobs lost (must be 0), seconds from a
worker kill to its trial failed, seconds from cancel to all workers idle, and the trial
process's memory drift over 200 trials. The tests start their own Redis and workers.

    .venv/bin/python benchmarks/faults.py
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from collections import defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TESTS = ["tests/integration/test_faults.py", "tests/integration/test_memory.py"]


def main() -> int:
    env = {**os.environ, "OMP_NUM_THREADS": "1"}
    run = subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-s", "-p", "no:cacheprovider", *TESTS],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
    )
    figures: dict[str, list[str]] = defaultdict(list)
    for line in run.stdout.splitlines():
        m = re.search(r"FIGURE (\S+) (.+)", line)
        if m:
            figures[m.group(1)].append(m.group(2))
    summary = run.stdout.strip().splitlines()[-1] if run.stdout.strip() else "no output"
    survived = sum(int(v.split()[-1]) for v in figures["faults_survived"])
    jobs_lost = 0 if run.returncode == 0 else "see failures"
    print("| figure | value |")
    print("|---|---|")
    print(
        f"| faults injected and survived | {survived} ({', '.join(figures['faults_survived'])}) |"
    )
    print(f"| trials lost | {', '.join(figures['trials_lost']) or '—'} |")
    print(f"| jobs lost | {jobs_lost} |")
    print(
        f"| seconds from worker kill to its trial failed | "
        f"{', '.join(figures['kill_to_failed_seconds']) or '—'} |"
    )
    print(
        f"| seconds from cancel to all workers idle | "
        f"{', '.join(figures['cancel_to_idle_seconds']) or '—'} |"
    )
    print(
        f"| trial-process RSS after warm-up (MiB) | "
        f"{', '.join(figures['trial_process_rss_mib']) or '—'} |"
    )
    print(
        f"| trial-process memory drift over 200 trials | "
        f"{', '.join(figures['trial_process_memory_drift']) or '—'} |"
    )
    print(f"\npytest: {summary}")
    return run.returncode


if __name__ == "__main__":
    sys.exit(main())
