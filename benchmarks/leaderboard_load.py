"""How long a 2,000-trial job's leaderboard takes to load (goal: within 2 s).

Writes 2,000 complete trial rows (with realistic parameters and fold scores) and a library of
stored out-of-fold predictions into a private Redis through the store, then times
``Job.leaderboard()`` and ``Job.trials()`` from a fresh client.

    .venv/bin/python benchmarks/leaderboard_load.py [--trials 2000]
"""

from __future__ import annotations

import argparse
import io
import time

import _common
import numpy as np
from tuttiml.service.client import Client
from tuttiml.service.keys import Keys
from tuttiml.service.records import TrialRow
from tuttiml.service.store import JobStore


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--trials", type=int, default=2000)
    args = p.parse_args()
    rng = np.random.default_rng(0)
    with _common.private_redis() as server:
        prefix = _common.new_prefix()
        client = Client(url=server.url, prefix=prefix)
        store = JobStore(client.redis, Keys(prefix))
        job_id = "bench-board"
        store.create_job(
            job_id,
            {
                "spec": '{"target": "y", "metric": "roc_auc"}',
                "task": "binary",
                "schema": {},
                "summary": {"rows": 1000},
            },
            shards=1,
        )
        families = ["bagging", "boosting", "voting", "stacking", "blending", "single"]
        for n in range(args.trials):
            folds = list(rng.normal(0.85, 0.02, 5))
            row = {
                "number": n,
                "family": families[n % 6],
                "state": "complete",
                "score": float(np.mean(folds)),
                "score_std": float(np.std(folds)),
                "fold_scores": folds,
                "fit_seconds": float(rng.gamma(2, 1)),
                "predict_ms": float(rng.gamma(2, 20)),
                "size_bytes": int(rng.integers(1e4, 1e7)),
                "members": "lgbm,linear,random_forest",
                "params": {f"{families[n % 6]}.p{i}": float(rng.random()) for i in range(12)},
            }
            buf = io.BytesIO()
            np.save(buf, rng.random((1000, 2)).astype(np.float32), allow_pickle=False)
            oof = buf.getvalue()
            store.record_trial(job_id, TrialRow(**row), oof=oof, library_size=5)
        fresh = Client(url=server.url, prefix=prefix)
        job = fresh.job(job_id)
        t0 = time.perf_counter()
        board = job.leaderboard()
        t1 = time.perf_counter()
        trials = job.trials()
        t2 = time.perf_counter()
        _common.print_table(
            ["figure", "value", "goal"],
            [
                [
                    f"leaderboard of a {args.trials}-trial job ({len(board)} rows)",
                    f"{t1 - t0:.3f} s",
                    "≤ 2 s",
                ],
                [f"all {len(trials)} trial rows as a DataFrame", f"{t2 - t1:.3f} s", ""],
            ],
        )


if __name__ == "__main__":
    main()
