#!/usr/bin/env python
"""Queue + store overhead: tutti's trial rate against a plain in-process Optuna loop.

The same fixed list of real candidate fits (LightGBM, HistGradientBoosting, random forest and
extra trees from the ``boosting`` and ``bagging`` families, each a 5-fold CV of one second or
more) is run three ways, on one generated classification table:

(a) plain: an in-memory Optuna study in this process; each fixed parameter set is enqueued
    and the objective builds the family estimator and calls ``workers.evaluation
    .cross_validate`` on the same ``Dataset`` and folds the workers use;
(b) tutti with one worker process (``parallelism=1``);
(c) tutti with two worker processes (``parallelism=2``).

For tutti the list is enqueued into the job's Optuna study (the Redis journal) before any
worker starts, and the job's ``defaults_enqueued`` flag is set so the workers add no default
trials of their own: the workers run exactly the list. Every run uses the same TPE sampler
settings and median pruner as ``workers.search.open_study``, and the plain loop reports the
mean of the folds so far after each fold exactly like a shard does, so (a) and (b) prune the
same trials (the fits are deterministic); pruned counts and fold rates are printed anyway.

Rates are measured from the first trial's start to the last trial's end (tutti: the trial
rows' ``started_at``/``finished_at``), so worker start-up and finalize are excluded; the
``incl. start-up`` column adds the time from launching the workers to the first trial.

Goals: 1-worker rate / plain rate ≥ 0.97; 2-worker rate / 1-worker rate ≥ 1.8 (on two idle
cores).

Run: ``.venv/bin/python benchmarks/throughput.py`` (about 3–4 minutes);
``--quick`` runs 6 fits on a smaller table (well under a minute of fitting).
"""

from __future__ import annotations

import argparse
import itertools
import statistics
import sys
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import _common  # first of the third-party block: one thread per fit, before numpy
import numpy as np
import optuna
import pandas as pd
from optuna.trial import TrialState
from sklearn.datasets import make_classification
from tuttiml.service import data as tables
from tuttiml.service.client import Client
from tuttiml.service.spec import Metric, parse_spec
from tuttiml.workers import ensembling
from tuttiml.workers.datasets import Dataset, build_dataset
from tuttiml.workers.evaluation import Pruned, cross_validate
from tuttiml.workers.families import get_family
from tuttiml.workers.families._learners import LEARNERS
from tuttiml.workers.journal import journal_storage
from tuttiml.workers.search import make_pruner

optuna.logging.set_verbosity(optuna.logging.WARNING)

FAMILIES = ("bagging", "boosting")
TARGET = "y"


# ---------------------------------------------------------------------------- workload
def make_table(rows: int, seed: int = 0) -> pd.DataFrame:
    """A binary classification table: 20 numeric features and one categorical column."""
    X, y = make_classification(
        n_samples=rows,
        n_features=20,
        n_informative=10,
        n_redundant=4,
        flip_y=0.05,
        random_state=seed,
    )
    frame = pd.DataFrame(X, columns=[f"x{i:02d}" for i in range(X.shape[1])])
    frame["segment"] = np.array(list("abcdef"))[np.digitize(X[:, 0], [-1.5, -0.5, 0, 0.5, 1.5])]
    frame[TARGET] = y
    return frame


def search_spec(n_trials: int, parallelism: int, seed: int) -> dict[str, Any]:
    return {
        "target": TARGET,
        "families": list(FAMILIES),
        "max_trials": n_trials,
        "parallelism": parallelism,
        "wall_seconds": 3600.0,
        "seed": seed,
    }


def local_dataset(frame: pd.DataFrame, spec_fields: dict[str, Any]) -> tuple[Dataset, Metric]:
    """The Dataset a worker builds for this table (same steps as submit + the trial child)."""
    spec = parse_spec(**spec_fields)
    prepared = tables.prepare(tables.read_table(frame), spec)
    decoded = tables.decode(tables.encode(prepared.frame))
    record = {
        "task": prepared.task,
        "schema": prepared.schema,
        "columns": {"high_cardinality": list(prepared.high_cardinality_columns)},
    }
    metric = prepared.spec.metric
    assert metric is not None
    return build_dataset(decoded, record, prepared.spec), Metric(metric)


def fixed_params(ctx: Any) -> list[dict[str, Any]]:
    """24 fixed candidates of about 1–2 s of 5-fold CV each on the default table (3000 rows).

    Families and kinds are interleaved so that a prefix of the list is a similar mix.
    """
    boosting = get_family("boosting")
    lgbm, hist = boosting.defaults(ctx)

    def lg(lr: float, leaves: int, sub: float, col: float) -> dict[str, Any]:
        return {
            "family": "boosting",
            **lgbm,
            "boosting.lgbm.learning_rate": lr,
            "boosting.lgbm.leaves": leaves,
            "boosting.lgbm.subsample": sub,
            "boosting.lgbm.colsample": col,
        }

    def hg(lr: float, leaves: int) -> dict[str, Any]:
        return {
            "family": "boosting",
            **hist,
            "boosting.hist_gb.learning_rate": lr,
            "boosting.hist_gb.leaves": leaves,
        }

    def forest(kind: str, n: int, max_features: float) -> dict[str, Any]:
        prefix = f"bagging.{kind}"
        return {
            "family": "bagging",
            "bagging.kind": kind,
            **LEARNERS[kind].defaults(ctx, prefix),
            f"{prefix}.n_estimators": n,
            f"{prefix}.max_features": max_features,
        }

    lgbms = [
        lg(0.05, 31, 1.0, 1.0),
        lg(0.05, 15, 0.8, 1.0),
        lg(0.05, 63, 1.0, 0.8),
        lg(0.03, 31, 0.8, 0.8),
        lg(0.05, 31, 0.9, 0.9),
        lg(0.04, 24, 1.0, 1.0),
        lg(0.05, 48, 0.8, 0.9),
        lg(0.03, 15, 1.0, 0.8),
    ]
    hists = [hg(0.05, 31), hg(0.05, 15), hg(0.04, 63), hg(0.05, 48)]
    rfs = [
        forest("random_forest", 50, 0.2),
        forest("random_forest", 60, 0.2),
        forest("random_forest", 50, 0.25),
        forest("random_forest", 70, 0.15),
        forest("random_forest", 40, 0.3),
        forest("random_forest", 60, 0.15),
    ]
    ets = [
        forest("extra_trees", 100, 0.4),
        forest("extra_trees", 120, 0.3),
        forest("extra_trees", 90, 0.5),
        forest("extra_trees", 110, 0.35),
        forest("extra_trees", 100, 0.45),
        forest("extra_trees", 130, 0.3),
    ]
    out: list[dict[str, Any]] = []
    groups = [lgbms, rfs, ets, hists]
    while any(groups):
        for g in groups:
            if g:
                out.append(g.pop(0))
    return out


def make_sampler_and_pruner(seed: int) -> tuple[optuna.samplers.BaseSampler, Any]:
    """The sampler and pruner settings of ``workers.search.open_study``."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        sampler = optuna.samplers.TPESampler(
            seed=seed, multivariate=True, group=True, n_startup_trials=10
        )
    pruner = make_pruner()
    return sampler, pruner


# ---------------------------------------------------------------------------- results
@dataclass
class Run:
    name: str
    trials: int = 0
    complete: int = 0
    pruned: int = 0
    failed: int = 0
    folds: int = 0
    span: float = float("nan")  # first trial start -> last trial end
    startup: float = 0.0  # workers launched -> first trial start
    scores: dict[int, list[float]] = field(default_factory=dict)
    spans: list[tuple[str, float, float]] = field(default_factory=list)  # (worker, start, end)

    @property
    def trial_seconds(self) -> float:
        """Mean time inside a trial (from its start to its end)."""
        return float(np.mean([e - s for _, s, e in self.spans])) if self.spans else float("nan")

    @property
    def steady_rate(self) -> float:
        """Trials/s without each worker's first trial (its cold start), summed over workers."""
        total = 0.0
        for w in {w for w, _, _ in self.spans}:
            mine = sorted((s, e) for ww, s, e in self.spans if ww == w)
            if len(mine) >= 2:
                total += (len(mine) - 1) / (mine[-1][1] - mine[0][1])
        return total if total > 0 else float("nan")

    @property
    def gap_seconds(self) -> float:
        """Mean time between one trial's end and the next trial's start on the same worker."""
        gaps = []
        for w in {w for w, _, _ in self.spans}:
            mine = sorted((s, e) for ww, s, e in self.spans if ww == w)
            gaps += [b[0] - a[1] for a, b in itertools.pairwise(mine)]
        return float(np.mean(gaps)) if gaps else float("nan")

    @property
    def rate(self) -> float:
        return (self.complete + self.pruned) / self.span

    @property
    def fold_rate(self) -> float:
        return self.folds / self.span

    @property
    def rate_with_startup(self) -> float:
        return (self.complete + self.pruned) / (self.span + self.startup)


# ---------------------------------------------------------------------------- (a) plain
def run_plain(data: Dataset, params: list[dict[str, Any]], metric: Metric, seed: int) -> Run:
    sampler, pruner = make_sampler_and_pruner(seed)
    study = optuna.create_study(direction="maximize", sampler=sampler, pruner=pruner)
    for p in params:
        study.enqueue_trial(p)
    ctx = data.context(seed)
    run = Run("plain Optuna loop (in-process)")
    starts: list[float] = []
    ends: list[float] = []

    def objective(trial: optuna.Trial) -> float:
        starts.append(time.time())
        try:
            family = str(trial.suggest_categorical("family", list(FAMILIES)))
            fam = get_family(family)
            chosen = fam.suggest(trial, ctx)
            template = fam.build(chosen, ctx)
            scores: list[float] = []

            def on_fold(fold: int, score: float) -> bool:
                scores.append(score)
                trial.report(float(np.mean(scores)), fold)
                return not trial.should_prune()

            try:
                ev = cross_validate(
                    template, data, metric, on_fold=on_fold, fit_info=ensembling.best_iterations
                )
            except Pruned as stop:
                run.folds += len(stop.args[0].fold_scores)
                raise optuna.TrialPruned() from None
            run.folds += len(ev.fold_scores)
            run.scores[trial.number] = list(ev.fold_scores)
            return ev.mean
        finally:
            ends.append(time.time())

    study.optimize(objective, n_trials=len(params), catch=(Exception,))
    states = [t.state for t in study.trials]
    run.trials = len(states)
    run.complete = states.count(TrialState.COMPLETE)
    run.pruned = states.count(TrialState.PRUNED)
    run.failed = states.count(TrialState.FAIL)
    run.span = max(ends) - min(starts)
    run.spans = [("plain", a, b) for a, b in zip(starts, ends, strict=True)]
    return run


# ---------------------------------------------------------------------------- (b), (c) tutti
def run_tutti(
    url: str,
    frame: pd.DataFrame,
    params: list[dict[str, Any]],
    *,
    processes: int,
    seed: int,
    log: Path | None,
    timeout: float,
) -> Run:
    client = Client(url=url, prefix=_common.new_prefix())
    try:
        job = client.submit(frame, **search_spec(len(params), processes, seed))
        # the fixed list goes into the job's study before any worker starts ...
        storage = journal_storage(client.redis, client.keys.journal(job.id))
        study = optuna.create_study(
            study_name=job.id, storage=storage, direction="maximize", load_if_exists=True
        )
        for p in params:
            study.enqueue_trial(p)
        # ... and the workers must not put their default trials in front of it
        if not client.redis.hsetnx(client.keys.job(job.id), "defaults_enqueued", 1):
            raise RuntimeError("defaults_enqueued was already set: workers got there first")
        workers = _common.Workers(url, client.settings.prefix, processes, burst=True, log=log)
        with workers:
            end = time.monotonic() + timeout
            while time.monotonic() < end:
                st = job.status()
                if st["trials_done"] + st["failed"] >= len(params) or st["state"] in (
                    "finished",
                    "failed",
                    "cancelled",
                ):
                    break
                time.sleep(0.5)
            else:
                raise TimeoutError(f"{processes}-worker run did not finish in {timeout:.0f} s")
            # let the job finalize and the burst workers leave on their own
            if workers.wait(max(60.0, timeout / 4)) is None:
                print(f"  note: {processes}-worker launcher still busy; stopping it", flush=True)
        rows = job.trials()
        name = f"tutti, {processes} worker process{'es' if processes > 1 else ''}"
        run = Run(name)
        done = rows[rows["state"].isin(["complete", "pruned"])] if len(rows) else rows
        run.trials = len(rows)
        run.complete = int((rows["state"] == "complete").sum()) if len(rows) else 0
        run.pruned = int((rows["state"] == "pruned").sum()) if len(rows) else 0
        run.failed = int((rows["state"] == "failed").sum()) if len(rows) else 0
        if len(done):
            run.folds = int(sum(len(f) for f in done["fold_scores"]))
            first = float(done["started_at"].min())
            run.span = float(done["finished_at"].max()) - first
            run.startup = first - workers.started
            run.spans = [
                (str(r["worker"]), float(r["started_at"]), float(r["finished_at"]))
                for _, r in done.iterrows()
            ]
            for _, r in done[done["state"] == "complete"].iterrows():
                run.scores[int(r["number"])] = list(r["fold_scores"])
        if run.failed:
            errors = rows.loc[rows["state"] == "failed", "error"].astype(str).unique()[:3]
            print(f"  {run.failed} failed trial(s) in {name}: {list(errors)}", flush=True)
        job.delete()
        return run
    finally:
        client.close()


# ---------------------------------------------------------------------------- report
def fmt(x: float, digits: int = 3) -> str:
    return "—" if x is None or not np.isfinite(x) else f"{x:.{digits}f}"


def same_work(a: Run, b: Run) -> str:
    """Whether two runs completed the same trials with the same fold scores."""
    if set(a.scores) != set(b.scores):
        return "no (different trials completed)"
    worst = max(
        (abs(x - y) for n in a.scores for x, y in zip(a.scores[n], b.scores[n], strict=False)),
        default=0.0,
    )
    return "yes" if worst < 1e-9 else f"no (max fold-score diff {worst:.2e})"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="6 fits on 2000 rows (smoke run)")
    ap.add_argument("--rows", type=int, default=None, help="table rows (default 3000)")
    ap.add_argument("--trials", type=int, default=None, help="fits from the list (max 24)")
    ap.add_argument("--repeats", type=int, default=1, help="repeat all three runs; medians")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--timeout", type=float, default=1200.0, help="limit per tutti run (s)")
    ap.add_argument("--log", type=Path, default=None, help="append worker output to this file")
    ap.add_argument("--verbose", action="store_true", help="also print every trial's seconds")
    args = ap.parse_args(argv)
    rows = args.rows or (2000 if args.quick else 3000)
    frame = make_table(rows, args.seed)
    data, metric = local_dataset(frame, search_spec(1, 1, args.seed))
    params = fixed_params(data.context(args.seed))
    n = args.trials or (6 if args.quick else 24)
    if not 1 <= n <= len(params):
        ap.error(f"--trials must be between 1 and {len(params)}")
    params = params[:n]
    print(
        f"throughput: {n} fixed fits ({', '.join(sorted({p['family'] for p in params}))}), "
        f"{rows} rows × {data.X.shape[1]} columns, {data.n_folds}-fold CV, metric {metric}, "
        f"{args.repeats} repeat(s)",
        flush=True,
    )
    runs: dict[str, list[Run]] = {"plain": [], "one": [], "two": []}
    with _common.private_redis() as server:
        for rep in range(args.repeats):
            tag = f"[{rep + 1}/{args.repeats}] " if args.repeats > 1 else ""
            print(f"{tag}(a) plain in-process loop ...", flush=True)
            runs["plain"].append(run_plain(data, params, metric, args.seed))
            for key, procs in (("one", 1), ("two", 2)):
                print(
                    f"{tag}({'b' if procs == 1 else 'c'}) tutti, {procs} worker(s) ...", flush=True
                )
                runs[key].append(
                    run_tutti(
                        server.url,
                        frame,
                        params,
                        processes=procs,
                        seed=args.seed,
                        log=args.log,
                        timeout=args.timeout,
                    )
                )

    def med(key: str, attr: str) -> float:
        return statistics.median(getattr(r, attr) for r in runs[key])

    print()
    headers = [
        "run",
        "trials (complete/pruned/failed)",
        "folds",
        "span s",
        "trials/s",
        "folds/s",
        "trials/s incl. start-up",
        "mean trial s",
        "mean gap s",
    ]
    table = []
    for key in ("plain", "one", "two"):
        last = runs[key][-1]
        table.append(
            [
                last.name,
                f"{last.trials} ({last.complete}/{last.pruned}/{last.failed})",
                last.folds,
                fmt(med(key, "span"), 1),
                fmt(med(key, "rate")),
                fmt(med(key, "fold_rate")),
                fmt(med(key, "rate_with_startup")) if key != "plain" else "—",
                fmt(med(key, "trial_seconds")),
                fmt(med(key, "gap_seconds")),
            ]
        )
    _common.print_table(headers, table)
    print()
    attrs = ("rate", "fold_rate", "steady_rate")

    def rate_row(label: str, key: str) -> list[str]:
        return [label, *(fmt(med(key, a)) for a in attrs), "", ""]

    def ratio_row(label: str, top: str, bottom: str, goal: float) -> list[str]:
        r = [med(top, a) / med(bottom, a) for a in attrs]
        return [label, *(fmt(x) for x in r), f"≥ {goal:g}", "yes" if r[0] >= goal else "no"]

    _common.print_table(
        ["figure", "trials/s", "folds/s", "steady trials/s", "goal", "met (trials/s)"],
        [
            rate_row("plain loop rate", "plain"),
            rate_row("1-worker rate", "one"),
            ratio_row("1-worker / plain", "one", "plain", 0.97),
            rate_row("2-worker rate", "two"),
            ratio_row("2-worker / 1-worker", "two", "one", 1.8),
        ],
    )
    print()
    if args.verbose:
        for key in ("plain", "one", "two"):
            for r in runs[key]:
                secs = [f"{e - s:.2f}" for _, s, e in sorted(r.spans, key=lambda t: t[1])]
                print(f"{r.name}: trial seconds in start order: {' '.join(secs)}")
        print()
    print(
        "span: first trial start to last trial end (worker start-up and finalize excluded); "
        "gap: between one trial's end and the next one's start on the same worker;\n"
        "steady: each worker's first trial (cold trial process: data load, first fit) left out."
    )
    print(f"plain and 1-worker did the same work: {same_work(runs['plain'][-1], runs['one'][-1])}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
