#!/usr/bin/env python
"""The model is due at the deadline; the explanations follow within their own budget.

Starts a private Redis and 2 worker processes, waits until they are up, submits one job with
``wall_seconds`` (default 120) on a public table that ships with scikit-learn (no download),
and measures from the moment ``submit`` returns:

- submit → the job is final and ``best_pipeline()`` returns a fitted estimator;
- submit → the explanations are committed (``status()["explanations"]`` done or failed),
  and their time after the model's commit against their budget.

Bar (issue 10): a 120 s job's ``best_pipeline()`` is available within 125 s of submit, and its
explanations finish within their own budget after that. Run on an otherwise idle machine::

    .venv/bin/python benchmarks/deadline.py                   # digits, 120 s: about 3 minutes
    .venv/bin/python benchmarks/deadline.py --table breast_cancer --repeats 2
    .venv/bin/python benchmarks/deadline.py --quick           # 30 s job, as a smoke run
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path
from typing import Any

from _common import ROOT, Workers, new_prefix, print_table, private_redis

#: name -> (scikit-learn loader, target); all ship with scikit-learn.
TABLES = {
    "digits": ("load_digits", "target"),
    "breast_cancer": ("load_breast_cancer", "target"),
    "wine": ("load_wine", "target"),
    "diabetes": ("load_diabetes", "target"),
}
#: Slack over ``wall_seconds`` the bar allows for the model (issue 10: 120 s job → 125 s).
MODEL_SLACK = 5.0


def load(name: str) -> tuple[Any, str]:
    """The table as a DataFrame and its target column."""
    import sklearn.datasets

    loader, target = TABLES[name]
    return getattr(sklearn.datasets, loader)(as_frame=True).frame, target


def _until(cond: Any, timeout: float, every: float = 0.1) -> Any:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        got = cond()
        if got:
            return got
        time.sleep(every)
    raise TimeoutError(f"not done within {timeout:.0f} s")


def one_run(table: str, wall: float, seed: int, log: Path) -> dict[str, Any]:
    """One job on a fresh Redis with 2 workers already running; the measured times."""
    from tuttiml.service.client import Client

    frame, target = load(table)
    with private_redis() as server:
        prefix = new_prefix()
        client = Client(url=server.url, prefix=prefix)
        with Workers(server.url, prefix, 2, burst=False, log=log):
            _until(lambda: len(client.workers()) >= 2, 120, every=0.5)
            job = client.submit(frame, target=target, wall_seconds=wall, parallelism=2, seed=seed)
            t0 = time.monotonic()
            _until(lambda: job.state.terminal, wall + 600)
            final = time.monotonic() - t0
            job.best_pipeline()
            model = time.monotonic() - t0
            st = _until(
                lambda: (s := job.status())["explanations"] in ("done", "failed") and s,
                3600,
                every=0.5,
            )
            explained = time.monotonic() - t0
            rec, extras = job.record(), job.extras()
        client.close()
    parts = st["explain_parts"]
    return {
        "table": table,
        "state": st["state"],
        "trials": st["trials_done"],
        "final_s": final,
        "model_s": model,
        "explained_s": explained,
        "after_commit_s": float(rec["explained_at"]) - float(rec["finalized_at"]),
        "budget_s": float(st["explain_budget"] or 0.0),
        "finalize_s": float(extras.get("finalize_seconds") or 0.0),
        "not_run": [f"{k} ({v[len('not run: ') :]})" for k, v in parts.items() if v != "done"],
    }


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--table", choices=sorted(TABLES), default="digits")
    p.add_argument("--wall-seconds", type=float, default=120.0)
    p.add_argument("--repeats", type=int, default=1)
    p.add_argument("--quick", action="store_true", help="a 30 s job (smoke run)")
    p.add_argument("--log", type=Path, default=ROOT / "benchmarks" / "deadline-workers.log")
    args = p.parse_args()
    wall = 30.0 if args.quick else args.wall_seconds
    runs = [one_run(args.table, wall, seed, args.log) for seed in range(args.repeats)]
    rows = []
    for r in runs:
        ok_model = r["model_s"] <= wall + MODEL_SLACK
        ok_explain = r["after_commit_s"] <= r["budget_s"]
        after = f"{r['after_commit_s']:.1f} / {r['budget_s']:.0f}"
        rows.append(
            [
                r["table"],
                f"{wall:.0f}",
                r["state"],
                r["trials"],
                f"{r['finalize_s']:.1f}",
                f"{r['model_s']:.1f}" + ("" if ok_model else " (over)"),
                after + ("" if ok_explain else " (over)"),
                f"{r['explained_s']:.1f}",
                "; ".join(r["not_run"]) or "—",
            ]
        )
    print_table(
        [
            "table",
            "wall s",
            "state",
            "trials",
            "finalize s",
            "submit→model s",
            "explanations after commit s / budget",
            "submit→explained s",
            "parts not run",
        ],
        rows,
    )
    met = all(
        r["model_s"] <= wall + MODEL_SLACK and r["after_commit_s"] <= r["budget_s"] for r in runs
    )
    print(
        f"\nbar (model ≤ wall + {MODEL_SLACK:.0f} s; explanations within budget): "
        f"{'met' if met else 'NOT met'}"
    )


if __name__ == "__main__":
    main()
