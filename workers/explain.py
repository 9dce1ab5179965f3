"""The explanations' parts, computed in the trial process after the model is committed.

(The honest winner estimate, bootstrap bias-corrected CV over the kept out-of-fold
predictions, is computed once by finalize: ``honesty.selection_estimate``.)

- significance: the top candidates re-evaluated on repeated k-fold with fresh seeds, each
  compared with #1 by the corrected repeated k-fold t-test (not corrected for having picked
  the best of many);
- bias and variance of the top candidates on a fixed evaluation slice;
- ensemble diagnostics for library ensembles (weights, member error correlation, gain);
- a leakage report (id-like columns, single features that alone predict the target, duplicate
  rows split across folds).

Every part is bounded by a time budget; the worker also runs each under a hard timeout
(``workers/explain_task.py``) and records a part that did not finish as not run.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.model_selection import cross_val_predict
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from tuttiml.service.spec import Metric
from tuttiml.workers import metrics
from tuttiml.workers.biasvar import bias_variance, holdout_split
from tuttiml.workers.datasets import Dataset
from tuttiml.workers.diagnostics import ensemble_gain, error_correlation
from tuttiml.workers.evaluation import cross_validate
from tuttiml.workers.families import get_family
from tuttiml.workers.honesty import corrected_resampled_ttest, repeated_kfold_indices

TOP_N = 5
REPEATS = 2
BV_ROUNDS = 10
BV_MAX_ROWS = 5000
LEAK_SCORE = 0.99


class Budget:
    """Seconds left for the optional parts."""

    def __init__(self, seconds: float) -> None:
        self.end = time.monotonic() + max(seconds, 0.0)

    def left(self) -> float:
        return self.end - time.monotonic()


def _build(member: dict[str, Any], data: Dataset, seed: int) -> Any:
    from tuttiml.workers.candidates import build_candidate

    return build_candidate(
        get_family(member["family"]), dict(member["params"]), data.context(seed)
    )


def significance(
    top: list[dict[str, Any]], data: Dataset, metric: Metric, seed: int, budget: Budget
) -> list[dict[str, Any]]:
    """Repeated k-fold scores of the top candidates and the corrected t-test against #1."""
    rows = data.search_rows
    X, y = data.X.iloc[rows], data.y[rows]
    k = min(data.n_folds, 5)
    splits = repeated_kfold_indices(len(rows), y, data.task, repeats=REPEATS, folds=k, seed=seed)
    scores: dict[str, list[float]] = {}
    for cand in top:  # best first; a candidate that cannot finish in time ends the part
        est = _build(cand, data, seed)
        vals = []
        for train, test in splits:
            if budget.left() <= 0:
                break
            fitted = clone(est).fit(X.iloc[train], y[train])
            pred = metrics.predictions(fitted, X.iloc[test], data.task, data.classes)
            vals.append(metrics.score(metric, y[test], pred, data.classes))
        if len(vals) < len(splits):
            break
        scores[cand["id"]] = vals
    if not scores:
        return []
    ref_id = top[0]["id"]
    ref = scores.get(ref_id)
    n_test = len(rows) / k
    out = []
    for cand in top:
        vals = scores.get(cand["id"])
        if vals is None or ref is None:
            continue
        s = metrics.sign(metric)
        row = {
            "candidate": cand["id"],
            "repeated_mean": s * float(np.mean(vals)),
            "repeated_std": float(np.std(vals, ddof=1)),
        }
        if cand["id"] != ref_id:
            t = corrected_resampled_ttest(vals, ref, n_train=len(rows) - n_test, n_test=n_test)
            p = float(t["p_value"])
            row.update(
                mean_diff=s * float(t["mean_diff"]),
                p_value=p if np.isfinite(p) else None,
                distinguishable=bool(np.isfinite(p) and p < 0.05),
            )
        out.append(row)
    return out


def bias_variance_top(
    top: list[dict[str, Any]], data: Dataset, seed: int, budget: Budget
) -> list[dict[str, Any]]:
    """Bias/variance of the top candidates: squared loss (regression) or 0-1 loss."""
    rows = data.search_rows[:BV_MAX_ROWS]
    ys = data.y[rows]
    train, test = holdout_split(len(rows), ys, data.task, fraction=0.25, seed=seed)
    X = data.X.iloc[rows]
    loss = "mse" if data.task == "regression" else "0-1_loss"
    out = []
    for cand in top:
        if budget.left() <= 0 and out:  # the winner always, the others while time allows
            break
        est = _build(cand, data, seed)
        res = bias_variance(
            est,
            X.iloc[train],
            ys[train],
            X.iloc[test],
            ys[test],
            loss=loss,
            rounds=BV_ROUNDS,
            seed=seed,
        )
        out.append(
            {
                "candidate": cand["id"],
                "family": cand["family"],
                "loss": loss,
                **{k: float(v) for k, v in res.items()},
            }
        )
    return out


def ensemble_diagnostics(
    library: list[dict[str, Any]],
    members: dict[int, np.ndarray],
    scores: dict[int, float],
    data: Dataset,
) -> list[dict[str, Any]]:
    """Weights, member error correlation and gain over the best member, per library ensemble."""
    rows = data.scored_rows
    out = []
    for ens in library:
        ids = [int(t) for t in ens["members"] if int(t) in members]
        if len(ids) < 2:
            continue
        preds = [members[t][rows] for t in ids]
        corr = error_correlation(preds, data.y[rows], data.task, classes=data.classes)
        out.append(
            {
                "candidate": ens["id"],
                "method": ens["method"],
                "members": [f"t{t}" for t in ids],
                "weights": ens.get("weights"),
                "error_corr": corr,
                "gain": ensemble_gain(float(ens["score"]), [scores[t] for t in ids]),
            }
        )
    return out


COMPOSITES = ("voting", "stacking", "blending")


def _members_of(est: Any) -> tuple[list[tuple[str, Any]], Any]:
    """(members as stand-alone pipelines, vote weights or None) of a composite candidate."""
    from sklearn.pipeline import Pipeline

    head: list[tuple[str, Any]] = []
    comp = est
    if isinstance(est, Pipeline):
        head, comp = list(est.steps[:-1]), est.steps[-1][1]
    members = [(name, m) for name, m in getattr(comp, "estimators", []) if m != "drop"]
    wrapped = [(name, Pipeline([*head, ("model", m)]) if head else m) for name, m in members]
    return wrapped, getattr(comp, "weights", None)


def composite_diagnostics(
    top: list[dict[str, Any]],
    scores: dict[str, float],
    data: Dataset,
    metric: Metric,
    seed: int,
    budget: Budget,
) -> list[dict[str, Any]]:
    """Member weights, member error correlation and gain for voting/stacking/blending winners.

    Each member is cross-validated alone on the job's folds (extra fold fits, time-bounded),
    so its errors line up with the composite's and with each other.
    """
    out = []
    rows = data.scored_rows
    for cand in top:
        if cand["family"] not in COMPOSITES or (budget.left() <= 0 and out):
            continue
        members, weights = _members_of(_build(cand, data, seed))
        if len(members) < 2:
            continue
        evs = [cross_validate(m, data, metric) for _, m in members]
        preds = [ev.oof[rows] for ev in evs]
        corr = error_correlation(preds, data.y[rows], data.task, classes=data.classes)
        if weights is None and cand["family"] == "voting":
            weights = [1.0] * len(members)
        norm = None if weights is None else [float(w) / float(sum(weights)) for w in weights]
        out.append(
            {
                "candidate": cand["id"],
                "method": cand["family"],
                "members": [name for name, _ in members],
                "weights": norm,
                "member_scores": [metrics.sign(metric) * ev.mean for ev in evs],
                "error_corr": corr,
                "gain": ensemble_gain(scores[cand["id"]], [ev.mean for ev in evs]),
            }
        )
    return out


def leakage_report(
    data: Dataset, metric: Metric, dropped: dict[str, str], seed: int, budget: Budget
) -> list[dict[str, Any]]:
    """Columns that look like ids, features that alone predict the target, split duplicates."""
    out = [
        {"column": col, "finding": why, "action": "dropped before the search"}
        for col, why in dropped.items()
    ]
    rows = data.search_rows[:20000]
    X, y = data.X.iloc[rows], data.y[rows]
    cls = data.task != "regression"
    for col in data.X.columns:
        if budget.left() <= 0:
            break
        feat = X[[col]]
        if data.schema[col] == "categorical":
            feat = feat.apply(lambda s: s.astype("category").cat.codes)
        feat = feat.fillna(-1e12)
        tree = (
            DecisionTreeClassifier(max_depth=4, random_state=seed)
            if cls
            else DecisionTreeRegressor(max_depth=4, random_state=seed)
        )
        try:
            pred = cross_val_predict(
                tree, feat, y, cv=3, method="predict_proba" if cls else "predict"
            )
        except ValueError:
            continue
        if cls and data.task == "binary":
            score = metrics.natural_score(Metric.ROC_AUC, y, pred, data.classes)
            name = "ROC AUC"
        elif cls:
            score = metrics.natural_score(Metric.ACCURACY, y, pred, data.classes)
            name = "accuracy"
        else:
            score = metrics.natural_score(Metric.R2, y, pred)
            name = "R²"
        if score >= LEAK_SCORE:
            out.append(
                {
                    "column": col,
                    "finding": f"alone predicts the target ({name} "
                    f"{score:.3f} with a depth-4 tree)",
                    "action": "kept; check it is known at prediction time",
                }
            )
    dup = _split_duplicates(data)
    if dup:
        out.append(
            {
                "column": "(rows)",
                "finding": f"{dup} exact duplicate rows fall in "
                "different CV folds, so a copy of a test row was seen in training",
                "action": "kept; deduplicate or use group_column if copies are the same entity",
            }
        )
    return out


def _split_duplicates(data: Dataset) -> int:
    rows = data.scored_rows
    frame = data.X.iloc[rows].copy()
    frame["__y"] = data.y[rows]
    hashed = pd.util.hash_pandas_object(frame, index=False).to_numpy()
    folds = data.fold_ids[rows]
    table = pd.DataFrame({"h": hashed, "f": folds})
    per = table.groupby("h")["f"].agg(["size", "nunique"])
    return int(per.loc[per["nunique"] > 1, "size"].sum())
