"""A job's table as the workers see it: features, target, classes and the fixed fold assignment.

The fold assignment is a vector of fold ids fixed by the job's seed, so every trial of every
shard scores on the same rows and out-of-fold predictions line up row by row:
``id >= 0`` test fold, ``PRE_BLOCK`` (-1) the first block of a time-ordered split (train only),
``HOLDOUT`` (-2) rows reserved for the one final hold-out score.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from sklearn.model_selection import (
    GroupKFold,
    KFold,
    StratifiedGroupKFold,
    StratifiedKFold,
    train_test_split,
)
from tuttiml.service.spec import Metric, SearchSpec, Task
from tuttiml.workers.families._base import FamilyContext

PRE_BLOCK = -1
HOLDOUT = -2
EXPANDING = "expanding"
KFOLD = "kfold"
ROW_CAP = 5000
#: Metrics that rank predicted probabilities, where label-only candidates cannot compete.
PROBABILITY_METRICS = frozenset({Metric.LOG_LOSS.value, Metric.ROC_AUC.value})
#: Successive halving over rows (tables of at least ``SearchSpec.halving_rows`` search rows):
#: the rung fits on this share of fold 0's training rows, and on at least
#: ``HALVING_MIN_RUNG`` rows (or half of them, whichever is fewer).
HALVING_SHARE = 0.125
HALVING_MIN_RUNG = 20_000


@dataclass
class Dataset:
    """Features, target and folds of one job (decoded once per process and cached)."""

    X: pd.DataFrame
    y: np.ndarray
    task: str
    classes: np.ndarray | None
    fold_ids: np.ndarray
    fold_mode: str
    schema: dict[str, str]
    numeric: tuple[str, ...]
    categorical: tuple[str, ...]
    high_cardinality: tuple[str, ...]
    halving_rows: int | None = None
    metric: str | None = None

    @property
    def n_folds(self) -> int:
        return int(self.fold_ids.max()) + 1

    @property
    def search_rows(self) -> np.ndarray:
        """Rows the search may fit on (everything but the hold-out)."""
        return np.flatnonzero(self.fold_ids != HOLDOUT)

    @property
    def holdout_rows(self) -> np.ndarray:
        return np.flatnonzero(self.fold_ids == HOLDOUT)

    @property
    def scored_rows(self) -> np.ndarray:
        """Rows that receive an out-of-fold prediction."""
        return np.flatnonzero(self.fold_ids >= 0)

    def folds(self) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """(train rows, test rows) per fold, as positional indices."""
        ids = self.fold_ids
        for f in range(self.n_folds):
            test = np.flatnonzero(ids == f)
            if self.fold_mode == EXPANDING:
                train = np.flatnonzero((ids >= PRE_BLOCK) & (ids < f))
            else:
                train = np.flatnonzero((ids >= 0) & (ids != f))
            yield train, test

    def rung(self, seed: int) -> tuple[np.ndarray, np.ndarray] | None:
        """(training subsample, test rows) of the row-halving rung, or None for small tables.

        The subsample is drawn from fold 0's training rows with a seed of the job, so every
        trial's rung score comes from the same rows and the pruner compares like with like.
        """
        if self.halving_rows is None or len(self.search_rows) < self.halving_rows:
            return None
        train, test = next(self.folds())
        size = max(int(len(train) * HALVING_SHARE), min(HALVING_MIN_RUNG, len(train) // 2))
        if not 0 < size < len(train):
            return None
        rng = np.random.default_rng(seed)
        return np.sort(rng.choice(train, size=size, replace=False)), test

    def context(self, seed: int) -> FamilyContext:
        return family_context(
            task=self.task,
            seed=seed,
            n_search_rows=len(self.search_rows),
            n_folds=self.n_folds,
            schema=self.schema,
            high_cardinality=self.high_cardinality,
            n_classes=0 if self.classes is None else len(self.classes),
            metric=self.metric,
        )


def split_columns(
    schema: dict[str, str], high_cardinality: tuple[str, ...]
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(numeric, low-cardinality categorical) feature columns of a schema."""
    numeric = tuple(c for c, kind in schema.items() if kind == "numeric")
    categorical = tuple(
        c for c, kind in schema.items() if kind == "categorical" and c not in high_cardinality
    )
    return numeric, categorical


def family_context(
    *,
    task: str,
    seed: int,
    n_search_rows: int,
    n_folds: int,
    schema: dict[str, str],
    high_cardinality: tuple[str, ...],
    n_classes: int,
    metric: str | None = None,
) -> FamilyContext:
    """The context families suggest and build in; the worker (from the job record) and the
    trial process (from the decoded table) both build it here, so they agree."""
    numeric, categorical = split_columns(schema, high_cardinality)
    train_rows = int(n_search_rows * (n_folds - 1) / max(n_folds, 1))
    return FamilyContext(
        task=task,
        random_state=seed,
        n_rows=max(train_rows, 1),
        numeric_columns=numeric,
        categorical_columns=categorical,
        high_cardinality_columns=high_cardinality,
        n_classes=n_classes,
        row_cap=ROW_CAP,
        scores_probabilities=metric in PROBABILITY_METRICS,
    )


def assign_folds(
    frame: pd.DataFrame, y: np.ndarray, spec: SearchSpec, task: str
) -> tuple[np.ndarray, str]:
    """Fold id per row, fixed by the seed: stratified k-fold, group-aware or expanding window."""
    n = len(y)
    ids = np.full(n, PRE_BLOCK, dtype=np.int64)
    rows = np.arange(n)
    classification = task != Task.REGRESSION.value
    if spec.holdout > 0:
        strat = y if classification else None
        groups = frame[spec.group_column] if spec.group_column else None
        if spec.order_column:
            order = np.argsort(frame[spec.order_column].to_numpy(), kind="stable")
            cut = round(n * (1 - spec.holdout))
            hold = order[cut:]
        elif groups is not None:
            uniq = pd.unique(groups.astype(str))
            rng = np.random.default_rng(spec.seed)
            chosen = set(
                rng.choice(uniq, size=max(1, int(len(uniq) * spec.holdout)), replace=False)
            )
            hold = rows[groups.astype(str).isin(chosen).to_numpy()]
        else:
            _, hold = train_test_split(
                rows, test_size=spec.holdout, random_state=spec.seed, stratify=strat
            )
        ids[hold] = HOLDOUT
    search = np.flatnonzero(ids != HOLDOUT)
    ys = y[search]
    if spec.order_column:
        order = search[np.argsort(frame[spec.order_column].to_numpy()[search], kind="stable")]
        blocks = np.array_split(order, spec.folds + 1)
        for f, block in enumerate(blocks[1:]):
            ids[block] = f
        return ids, EXPANDING
    if spec.group_column:
        groups = frame[spec.group_column].astype(str).to_numpy()[search]
        splitter: Any = (
            StratifiedGroupKFold(spec.folds, shuffle=True, random_state=spec.seed)
            if classification
            else GroupKFold(spec.folds)
        )
        split = splitter.split(np.zeros(len(search)), ys, groups)
    elif classification:
        split = StratifiedKFold(spec.folds, shuffle=True, random_state=spec.seed).split(
            np.zeros(len(search)), ys
        )
    else:
        split = KFold(spec.folds, shuffle=True, random_state=spec.seed).split(search)
    for f, (_, test) in enumerate(split):
        ids[search[test]] = f
    return ids, KFOLD


def target_vector(series: pd.Series, task: str) -> np.ndarray:
    """The target as numpy: float for regression; labels (ints when integral) otherwise."""
    if task == Task.REGRESSION.value:
        return series.to_numpy(dtype=float)
    values = series.to_numpy()
    if (
        values.dtype.kind == "f"
        and np.all(np.isfinite(values))
        and np.all(values == np.round(values))
    ):
        return values.astype(np.int64)
    if values.dtype.kind in "OUT":
        return values.astype(str).astype(object)
    return values


def float32_if_exact(values: np.ndarray) -> np.ndarray | None:
    """A float32 copy of a float64 column when that is exact enough for fitting, else None.

    "Exact enough": no value moves by more than 1e-6 of the column's standard deviation and
    nothing overflows. Integers below 2**24 and features of ordinary scale pass (float32 keeps
    about seven significant digits); timestamps in seconds or large identifiers, whose spread
    is small next to their offset, keep float64.
    """
    if values.dtype != np.float64 or len(values) == 0:
        return None
    with np.errstate(over="ignore", invalid="ignore"):
        small = values.astype(np.float32)
        if np.count_nonzero(np.isinf(small)) != np.count_nonzero(np.isinf(values)):
            return None
        finite = np.isfinite(values)
        if not finite.any():
            return small
        err = float(np.max(np.abs(small[finite].astype(np.float64) - values[finite])))
        spread = float(np.std(values[finite]))
    return small if err <= 1e-6 * spread else None


def compact_floats(frame: pd.DataFrame, columns: list[str]) -> None:
    """Replace float64 ``columns`` of ``frame`` by float32 where exact enough, in place.

    Column by column, so the old array is freed before the next is converted (the decoded
    frame keeps one block per column) and the peak stays near one copy of the table.
    """
    for name in columns:
        small = float32_if_exact(frame[name].to_numpy())
        if small is not None:
            frame[name] = small


def build_dataset(frame: pd.DataFrame, record: dict[str, Any], spec: SearchSpec) -> Dataset:
    """Turn the decoded table and the job record into a :class:`Dataset`.

    Numeric feature columns of ``frame`` are narrowed to float32 in place where exact enough
    (:func:`float32_if_exact`); the target, order and group columns are left as they are.
    """
    task = str(record["task"])
    schema: dict[str, str] = dict(record["schema"])
    keep = {spec.target, spec.order_column, spec.group_column}
    compact_floats(frame, [c for c, kind in schema.items() if kind == "numeric" and c not in keep])
    y = target_vector(frame[spec.target], task)
    fold_ids, mode = assign_folds(frame, y, spec, task)
    X = frame[list(schema)]
    classes = np.unique(y) if task != Task.REGRESSION.value else None
    columns = record.get("columns") or {}
    high = tuple(columns.get("high_cardinality", ()))
    numeric, categorical = split_columns(schema, high)
    return Dataset(
        X=X,
        y=y,
        task=task,
        classes=classes,
        fold_ids=fold_ids,
        fold_mode=mode,
        schema=schema,
        numeric=numeric,
        categorical=categorical,
        high_cardinality=high,
        halving_rows=spec.halving_rows,
        metric=None if spec.metric is None else str(spec.metric),
    )
