"""What the trial process does: evaluate a candidate on the folds, or refit the chosen one.

Runs only inside the supervised child (``workers.child``). It reads the job's record and
data from Redis (read-only) and never writes to the store: results go back to the worker.
"""

from __future__ import annotations

import hashlib
import time
import zipfile
from dataclasses import dataclass
from multiprocessing.connection import Connection
from typing import Any

import numpy as np
from sklearn.pipeline import Pipeline
from tuttiml.service.connection import connect
from tuttiml.service.data import parquet_table, table_frame
from tuttiml.service.keys import Keys
from tuttiml.service.records import Combiner, LibraryRecord
from tuttiml.service.spec import Metric, SearchSpec
from tuttiml.service.store import JobReader
from tuttiml.workers import combining, ensembling, metrics
from tuttiml.workers.candidates import build_candidate, describe_members, refit_candidate
from tuttiml.workers.datasets import Dataset, build_dataset
from tuttiml.workers.evaluation import Pruned, cross_validate
from tuttiml.workers.families import get_family
from tuttiml.workers.faults import explain_pause, fold_pause, inject_fault
from tuttiml.workers.oof import oof_array
from tuttiml.workers.thresholds import decision_threshold


@dataclass
class _Entry:
    key: tuple[str, str, str]
    spec: SearchSpec
    record: dict[str, Any]
    data: Dataset


class DataCache:
    """The current job's decoded table, kept for the life of the process (one job at a time)."""

    def __init__(self) -> None:
        self._entry: _Entry | None = None
        self._clients: dict[str, JobReader] = {}

    def store(self, url: str, prefix: str) -> JobReader:
        key = f"{prefix}|{url}"
        if key not in self._clients:
            self._clients[key] = JobReader(connect(url), Keys(prefix))
        return self._clients[key]

    def get(self, request: dict[str, Any]) -> _Entry:
        store = self.store(request["redis_url"], request["prefix"])
        record = store.job(request["job_id"])
        key = (request["prefix"], request["job_id"], str(record["data"]))
        if self._entry is not None and self._entry.key == key:
            return self._entry
        self._entry = None  # free the previous table before decoding the next
        spec = SearchSpec.model_validate(record["spec"])
        raw = store.get_data(str(record["data"]))
        table = parquet_table(raw)
        del raw  # the encoded bytes go before the frame is built
        frame = table_frame(table)
        del table
        self._entry = _Entry(key, spec, record, build_dataset(frame, record, spec))
        return self._entry


def evaluate(
    request: dict[str, Any], cache: DataCache, conn: Connection
) -> tuple[str, dict[str, Any]]:
    """Cross-validate the requested candidate, asking the worker after each fold."""
    entry = cache.get(request)
    family = get_family(request["family"])
    ctx = entry.data.context(int(request["seed"]))
    template = build_candidate(family, dict(request["params"]), ctx)
    inject_fault(request)

    pause = fold_pause()

    def on_fold(fold: int, score: float) -> bool:
        if pause:
            time.sleep(pause)
        conn.send(("fold", fold, score))
        answer = conn.recv()
        return bool(answer[0] == "go")

    try:
        ev = cross_validate(
            template,
            entry.data,
            Metric(entry.spec.metric),
            on_fold=on_fold,
            fit_info=ensembling.best_iterations,
            seed=int(request["seed"]),
        )
        kind = "done"
    except Pruned as stop:
        ev = stop.args[0]
        kind = "pruned"
    return kind, {
        "fold_scores": ev.fold_scores,
        "oof": ev.oof.astype(np.float32) if kind == "done" else None,
        "fit_seconds": ev.fit_seconds,
        "predict_ms": ev.predict_ms_per_1000 if np.isfinite(ev.predict_ms_per_1000) else None,
        "fit_info": ev.fit_info,
        "members": describe_members(template),
        "size_bytes": ev.size_bytes,
        "rung_score": ev.rung_score,
    }


def _in_user_labels(pipe: Any, data: Dataset, record: dict[str, Any]) -> tuple[Any, np.ndarray]:
    """The estimator to export and the target to fit it on: the user's labels when they differ.

    The search scores normalised class labels (0/1 for a boolean target, ints for whole-number
    floats); an exported classifier must answer in the user's own labels and dtype, so it is
    wrapped in :class:`~workers.ensembling.UserLabels` and fitted on those labels.
    """
    labels, dtype = record.get("labels") or [], record.get("label_dtype") or ""
    if data.classes is None or not dtype or len(labels) != len(data.classes):
        return pipe, data.y
    classes = data.classes.tolist()
    same = (
        all(type(a) is type(b) and a == b for a, b in zip(labels, classes, strict=True))
        and np.dtype(dtype) == data.y.dtype
    )
    if same:
        return pipe, data.y
    wrapper = ensembling.UserLabels(pipe, classes=classes, labels=list(labels), dtype=dtype)
    user = np.empty(len(labels), dtype=object)
    user[:] = list(labels)
    return wrapper, user[np.searchsorted(data.classes, data.y)]


def refit(request: dict[str, Any], cache: DataCache) -> dict[str, Any]:
    """Fit the chosen candidate (or library ensemble) on all search rows; return skops bytes."""
    import skops.io as sio

    entry = cache.get(request)
    data, spec = entry.data, entry.spec
    seed = int(request["seed"])
    members = request["members"]
    combiner = request.get("combiner")
    if combiner:
        estimators = [(f"t{m['number']}", refit_candidate(m, data, seed)) for m in members]
        cls = (
            combining.LinearCombinerRegressor
            if data.task == "regression"
            else combining.LinearCombinerClassifier
        )
        model: Any = cls(
            estimators,
            mode=combiner["mode"],
            weights=combiner.get("weights"),
            coef=combiner.get("coef"),
            intercept=combiner.get("intercept"),
        )
    else:
        model = refit_candidate(members[0], data, seed)
    pipe: Any = Pipeline(
        [("frame", ensembling.FrameNormalizer(schema=data.schema)), ("model", model)]
    )
    threshold = decision_threshold(
        request, cache.store(request["redis_url"], request["prefix"]), entry.data, entry.spec
    )
    if threshold is not None and not hasattr(pipe, "predict_proba"):
        threshold = None  # a label-only winner (hard vote) keeps its own labels
    if threshold is not None:
        from sklearn.model_selection import FixedThresholdClassifier

        pipe = FixedThresholdClassifier(pipe, threshold=threshold, response_method="predict_proba")
    rows = data.search_rows
    exported, y_fit = _in_user_labels(pipe, data, entry.record)
    t0 = time.perf_counter()
    exported.fit(data.X.iloc[rows], y_fit[rows])
    fit_seconds = time.perf_counter() - t0
    if exported is not pipe:
        pipe = exported.estimator_  # the fitted pipeline, in the labels the search scores
    sample = data.X.iloc[rows[: min(1000, len(rows))]]
    t1 = time.perf_counter()
    exported.predict(sample)
    predict_ms = (time.perf_counter() - t1) * 1000.0 * 1000.0 / max(len(sample), 1)
    holdout = None
    hold = data.holdout_rows
    if len(hold):
        X_hold = data.X.iloc[hold]
        if threshold is not None and data.classes is not None:
            # score the labels the exported pipeline predicts (the tuned threshold), not argmax
            pred = metrics.one_hot(pipe.predict(X_hold), data.classes)
        else:
            pred = metrics.predictions(pipe, X_hold, data.task, data.classes)
        holdout = metrics.score(Metric(spec.metric), data.y[hold], pred, data.classes)
    blob = sio.dumps(exported, compression=zipfile.ZIP_DEFLATED)
    return {
        "blob": blob,
        "sha256": hashlib.sha256(blob).hexdigest(),
        "fit_seconds": fit_seconds,
        "predict_ms": predict_ms,
        "holdout_score": holdout,
        "untrusted": sorted(sio.get_untrusted_types(data=blob)),
        "size_bytes": len(blob),
        "decision_threshold": threshold,
    }


def library(request: dict[str, Any], cache: DataCache) -> list[dict[str, Any]]:
    """Library ensembles over the kept out-of-fold predictions (no fold fits), scored honestly.

    Each is a ``LibraryRecord`` dump (the worker stores them in the job's result).
    """
    from tuttiml.workers.library import build_library_ensembles

    entry = cache.get(request)
    data = entry.data
    store = cache.store(request["redis_url"], request["prefix"])
    blobs = store.library_members(request["job_id"], request["families"])
    rows = data.scored_rows
    members = {t: oof_array(b)[rows] for t, b in blobs.items()}
    if len(members) < 2:
        return []
    out = []
    for ens in build_library_ensembles(
        members,
        data.y[rows],
        data.fold_ids[rows],
        Metric(entry.spec.metric),
        data.task,
        data.classes,
    ):
        doc = ens.to_json()
        if ens.method == "selection":
            combiner = Combiner(mode="average", weights=doc["weights"])
        elif data.task == "regression":  # non-negative least squares weights, no intercept
            combiner = Combiner(mode="linear", coef=doc["weights"], intercept=0.0)
        else:
            combiner = Combiner(
                mode="logistic", coef=doc["meta_coef"], intercept=doc["meta_intercept"]
            )
        record = LibraryRecord(
            id=f"library-{ens.method}",
            method=ens.method,
            members=doc["member_trial_ids"],
            weights=doc["weights"],
            score=doc["honest_mean"],
            score_std=doc["honest_std"],
            fold_scores=doc["fold_scores"],
            in_sample_score=doc["in_sample_score"],
            combiner=combiner,
        )
        out.append(record.dump())
    return out


def selection(request: dict[str, Any], cache: DataCache) -> dict[str, Any]:
    """BBC-CV of picking the best kept candidate: computed once per finalize, then stored.

    Finalize ranks trials by their CV score minus its optimism; the report shows its estimate
    and interval as the winner's honest estimate (greater-is-better here).
    """
    from tuttiml.workers.honesty import selection_estimate

    entry = cache.get(request)
    data = entry.data
    store = cache.store(request["redis_url"], request["prefix"])
    blobs = store.library_members(request["job_id"], request["families"])
    rows = data.scored_rows
    ids = sorted(blobs)
    return selection_estimate(
        [oof_array(blobs[t])[rows] for t in ids],
        data.y[rows],
        Metric(entry.spec.metric),
        classes=data.classes,
        seed=int(data.fold_ids.size),
    )


def leakage(request: dict[str, Any], cache: DataCache) -> list[dict[str, Any]]:
    """The leakage checks on the job's table, run in full (cheap: a small tree per column)."""
    from tuttiml.workers import explain as ex

    entry = cache.get(request)
    return ex.leakage_report(
        entry.data,
        Metric(entry.spec.metric),
        request.get("dropped") or {},
        entry.spec.seed,
        ex.Budget(float("inf")),
    )


def explain(request: dict[str, Any], cache: DataCache) -> list[dict[str, Any]]:
    """One part of the explanations (``request["part"]``), within ``budget_seconds``.

    The worker asks for each part separately, with a hard timeout, so a part that overruns
    loses only itself.
    """
    from tuttiml.workers import explain as ex

    entry = cache.get(request)
    data, metric = entry.data, Metric(entry.spec.metric)
    seed = int(request["seed"])
    budget = ex.Budget(float(request.get("budget_seconds", 0.0)))
    top = request.get("top") or []
    part = request["part"]
    explain_pause(part)
    if part == "ensembles":
        store = cache.store(request["redis_url"], request["prefix"])
        members = {
            t: oof_array(b)
            for t, b in store.library_members(request["job_id"], request["families"]).items()
        }
        scores = {int(k): v for k, v in request["scores"].items()}
        return ex.ensemble_diagnostics(request.get("library") or [], members, scores, data)
    if part == "leakage":  # normally run before the search; here when that did not happen
        return leakage(request, cache)
    if part == "significance":
        return ex.significance(top, data, metric, seed, budget)
    if part == "bias_variance":
        return ex.bias_variance_top(top, data, seed, budget)
    if part == "composites":
        scores = {c["id"]: float(c["score"]) for c in top if "score" in c}
        return ex.composite_diagnostics(top, scores, data, metric, seed, budget)
    raise ValueError(f"unknown explanation part {part!r}")


__all__ = ["DataCache", "evaluate", "explain", "library", "refit"]
