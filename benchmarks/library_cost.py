"""Library ensembles: what their step costs inside real jobs (goal: < 5% of the job's wall time).

Runs one tutti job per dataset (every family, real worker processes on a private Redis) and
reads back from finalize's record: the seconds spent building and honestly scoring the library
ensembles (greedy selection and the stacked meta-model over the kept out-of-fold
predictions; no fold fits), the members they drew from, the job's wall time from submit to the
committed pipeline, and which candidate was exported.

    .venv/bin/python benchmarks/library_cost.py [--trials 60] [--datasets breast_cancer,digits]
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse
import time

import _common
from _common import print_table
from sklearn import datasets as skd

LOADERS = {
    "breast_cancer": skd.load_breast_cancer,
    "wine": skd.load_wine,
    "digits": skd.load_digits,
    "diabetes": skd.load_diabetes,
}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=60, help="trials per job (default 60)")
    ap.add_argument("--datasets", default="breast_cancer,digits,diabetes")
    ap.add_argument("--cores", type=int, default=2, help="worker processes (default 2)")
    args = ap.parse_args()
    names = [n for n in args.datasets.split(",") if n]
    unknown = [n for n in names if n not in LOADERS]
    if unknown:
        ap.error(f"unknown dataset(s) {unknown}; choose from {', '.join(LOADERS)}")
    rows = []
    with _common.private_redis() as server:
        from tuttiml.service.client import Client

        client = Client(url=server.url, prefix=_common.new_prefix())
        with _common.Workers(server.url, client.settings.prefix, args.cores, burst=False):
            for name in names:
                frame = LOADERS[name](as_frame=True).frame
                t0 = time.time()
                job = client.submit(
                    frame, target="target", max_trials=args.trials, parallelism=args.cores, seed=0
                )
                st = job.wait(timeout=3600, poll=0.5)
                wall = time.time() - t0
                if st["state"] != "finished":
                    raise RuntimeError(f"{name}: job ended {st['state']}: {st['reason']}")
                extras = job.extras()
                lib = extras.get("library") or []
                members = sorted({int(m) for e in lib for m in e["members"]})
                board = job.leaderboard()
                exported = board.loc[board["exported"], "candidate"].iloc[0]
                seconds = float(extras.get("library_seconds") or 0.0)
                rows.append(
                    [
                        name,
                        len(frame),
                        st["trials_done"],
                        len(members),
                        f"{seconds:.2f}",
                        f"{wall:.1f}",
                        f"{100 * seconds / wall:.1f}%",
                        f"{float(extras.get('trial_optimism') or 0.0):.4f}",
                        exported,
                    ]
                )
                job.delete()
        client.close()
    print_table(
        [
            "dataset",
            "rows",
            "trials",
            "library members",
            "library s",
            "job wall s",
            "share",
            "trial optimism",
            "exported",
        ],
        rows,
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
