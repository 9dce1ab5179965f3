"""The process that runs trials keeps a flat resident size over many trials."""

from __future__ import annotations

import psutil
import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.workers.child import TrialProcess

pytestmark = [pytest.mark.integration, pytest.mark.slow]

WARM_UP, TRIALS = 20, 200


def test_trial_process_memory_is_flat_over_200_trials(
    client,
    redis_url: str,  # type: ignore[no-untyped-def]
    prefix: str,
) -> None:
    frame = load_breast_cancer(as_frame=True).frame
    job = client.submit(frame, target="target", max_trials=1, folds=3)
    proc = TrialProcess()
    base = {"redis_url": redis_url, "prefix": prefix, "job_id": job.id, "seed": 0}
    try:
        proc.request("prepare", base, timeout=120)
        rss = []
        for i in range(WARM_UP + TRIALS):
            # alternate cheap candidates of two kinds so allocations differ from trial to trial
            if i % 2:
                params = {
                    "single.learner": "linear",
                    "single.linear.C": 0.1 + (i % 7),
                    "single.linear.class_weight": "none",
                }
            else:
                params = {
                    "single.learner": "tree",
                    "single.tree.max_depth": 2 + i % 6,
                    "single.tree.min_samples_leaf": 1 + i % 5,
                    "single.tree.class_weight": "none",
                }
            kind, result = proc.request(
                "evaluate", {**base, "family": "single", "params": params, "trial": i}, timeout=120
            )
            assert kind == "done" and len(result["fold_scores"]) == 3
            rss.append(psutil.Process(proc.pid).memory_info().rss)
    finally:
        proc.close()
    ref = rss[WARM_UP - 1]
    drift = max(abs(r - ref) / ref for r in rss[WARM_UP:])
    print(f"FIGURE trial_process_rss_mib {ref / 2**20:.1f}")
    print(f"FIGURE trial_process_memory_drift {drift:.3f}")
    assert drift <= 0.10
