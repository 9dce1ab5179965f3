"""Checking a table against a spec; every problem found goes into one error."""

from __future__ import annotations

import numpy as np
import pandas as pd
from tuttiml.service.data._common import (
    HIGH_CARDINALITY,
    MAX_INTEGER_CLASSES,
    MIN_CHECK_ROWS,
    ColumnKind,
    Prepared,
    _data_error,
    _did_you_mean,
    _label,
    _listing,
    _Report,
    _show,
)
from tuttiml.service.data.labels import (
    _labels_may_merge,
    _raw_column,
    _user_labels,
    _UserLabels,
)
from tuttiml.service.data.leaks import _check_leaks
from tuttiml.service.data.normalizing import _normalize
from tuttiml.service.errors import InvalidSpecError
from tuttiml.service.spec import SearchSpec, Task


def prepare(df: pd.DataFrame, spec: SearchSpec) -> Prepared:
    """Normalise and check a table against a spec; resolve the task and metric.

    Rows with a missing target are dropped (with a warning). Features that cannot help are
    dropped (with a warning): all-missing, constant (one value in every row) and id-like columns
    (a distinct whole number or text in every row). A feature that copies the target, is a
    strictly monotone transform of it or maps one-to-one onto it is refused as a leak unless
    ``spec.allow_leaks``. The group/order column stays in the frame (the workers build the folds
    from it) but is not a feature.

    With ``task="auto"``: two distinct target values -> binary; text with more -> multiclass;
    whole numbers with 3..``MAX_INTEGER_CLASSES`` distinct values -> multiclass (with a warning,
    as counts could be amounts); any other numbers -> regression.

    Args:
        df: the user's table (any dtypes; see :func:`normalize_frame`).
        spec: the validated search spec.

    Returns:
        The checked table and what the search needs to know about it.

    Raises:
        InvalidDataError: one error listing every problem with the table (and any spec
            problem found alongside).
        InvalidSpecError: when every problem is a spec field the table contradicts (``task``,
            ``metric``).
    """
    if not isinstance(df, pd.DataFrame):
        got = type(df).__name__
        raise _data_error(f"data: expected a pandas DataFrame (got {got}); use read_table().", got)
    if df.shape[0] == 0 or df.shape[1] == 0:
        raise _data_error(
            f"data: the table is empty ({df.shape[0]} rows, {df.shape[1]} columns); pass a "
            "table with named columns and at least one row of data.",
            df.shape,
        )
    frame, report = _normalize(df)
    frame = _check_named_columns(frame, spec, report)
    task: Task | None = None
    users: _UserLabels | None = None
    if spec.target in frame.columns:
        kept = frame[spec.target].notna().to_numpy()
        frame = _drop_missing_target(frame, spec.target, report)
        raw = _raw_column(df, spec.target)[kept] if len(frame) else None
        n_problems = len(report.problems)
        if raw is not None and _labels_may_merge(raw.dtype):  # merged labels would also read
            users = _user_labels(raw, frame[spec.target], report)  # as fewer classes: first
        if raw is not None and len(report.problems) == n_problems:
            task = _resolve_task(frame[spec.target], spec, report)
        if raw is not None and users is None and task not in (None, Task.REGRESSION):
            users = _user_labels(raw, frame[spec.target], report)  # numbers, booleans
    resolved = _resolve_metric(spec, task, report)
    features = _select_features(frame, spec, report)
    if spec.target in frame.columns and len(frame):
        features = _check_leaks(frame, features, spec, report)
    _check_split_columns(frame, spec, report)
    report.raise_problems()
    if task is None or resolved is None:  # pragma: no cover - each such path records a problem
        raise RuntimeError("internal error: task unresolved although no problem was recorded")
    return _build(frame, features, resolved, task, report, users)


def _check_named_columns(frame: pd.DataFrame, spec: SearchSpec, report: _Report) -> pd.DataFrame:
    """The target, group, order and drop columns the spec names must exist."""
    columns = list(frame.columns)
    named = {"target": spec.target, "group_column": spec.group_column}
    named["order_column"] = spec.order_column
    for where, name in named.items():
        if name is None or name in frame.columns:
            continue
        fix = (
            f"set target to one of its columns ({_listing(columns)})"
            if where == "target"
            else f"name an existing column or leave {where} out"
        )
        report.add(
            where,
            f"{where}: column {name!r} is not in the table{_did_you_mean(name, columns)}; {fix}.",
            name,
        )
    absent = [c for c in spec.drop_columns if c not in frame.columns]
    if absent:
        report.add(
            "drop_columns",
            f"drop_columns: {', '.join(map(repr, absent))} not in the table; remove them from "
            f"drop_columns (columns are: {_listing(columns)}).",
            absent,
        )
    present = [c for c in spec.drop_columns if c in frame.columns]
    report.dropped.update(dict.fromkeys(present, "listed in drop_columns"))
    return frame.drop(columns=present)


def _drop_missing_target(frame: pd.DataFrame, target: str, report: _Report) -> pd.DataFrame:
    missing = frame[target].isna().to_numpy()
    n_missing, n = int(missing.sum()), len(frame)
    if n_missing == n:
        report.add(
            "target",
            f"target: column {target!r} has no values (all {n} rows missing); choose a target "
            "column with values or fill it in.",
            target,
        )
    elif n_missing:
        report.warnings.append(
            f"target {target!r}: dropped {n_missing} of {n} rows ({n_missing / n:.1%}) with a "
            "missing target."
        )
    return frame.loc[~missing].reset_index(drop=True) if n_missing else frame


def _resolve_task(y: pd.Series, spec: SearchSpec, report: _Report) -> Task | None:
    """Guess the task from the target (``auto``) or check that the named task fits it."""
    target, numeric, counts = spec.target, y.dtype.kind == "f", y.value_counts()
    if len(counts) < 2:
        report.add(
            "target",
            f"target: column {target!r} has the single value {_show(counts.index[0])} in all "
            f"{len(y)} rows; pick a target that varies.",
            target,
        )
        return None
    whole = numeric and bool(np.all(np.round(y.to_numpy()) == y.to_numpy()))
    task = guess = _guess_task(numeric, whole, len(counts))
    if spec.task is Task.AUTO and task is Task.MULTICLASS and numeric:
        report.warnings.append(
            f"target {target!r}: {len(counts)} distinct whole numbers, treated as multiclass "
            "labels; set task='regression' if they are amounts."
        )
    elif spec.task is not Task.AUTO:
        mismatch = _task_mismatch(spec.task, y, whole, guess, len(counts))
        if mismatch:
            report.add("task", f"task: {mismatch}", spec.task.value, spec=True)
            return None
        task = spec.task
    if task is not Task.REGRESSION:
        _check_class_sizes(counts, spec, report)
    return task


def _guess_task(numeric: bool, whole: bool, n_distinct: int) -> Task:
    if n_distinct == 2:
        return Task.BINARY
    if not numeric or (whole and n_distinct <= MAX_INTEGER_CLASSES):
        return Task.MULTICLASS
    return Task.REGRESSION


def _task_mismatch(task: Task, y: pd.Series, whole: bool, guess: Task, n: int) -> str | None:
    """Why the named task cannot fit this target with ``n`` distinct values (None if it can)."""
    seen = ", ".join(_show(v) for v in y.drop_duplicates().iloc[:3]) + (", …" if n > 3 else "")
    target, numeric = y.name, y.dtype.kind == "f"
    fix = f"use task={guess.value!r} or leave task='auto'."
    if task is Task.REGRESSION and not numeric:
        return f"'regression' needs a numeric target, but {target!r} holds text ({seen}); {fix}"
    if task is Task.BINARY and n != 2:
        return f"'binary' needs exactly 2 classes, but {target!r} has {n} ({seen}); {fix}"
    if task is Task.MULTICLASS and n == 2:
        return f"'multiclass' needs 3 or more classes, but {target!r} has 2 ({seen}); {fix}"
    if task is Task.MULTICLASS and numeric and not whole:
        return f"'multiclass' needs class labels, but {target!r} holds fractions ({seen}); {fix}"
    return None


def _check_class_sizes(counts: pd.Series, spec: SearchSpec, report: _Report) -> None:
    """Stratified folds need every class in every fold."""
    rare = counts[counts < spec.folds]
    if rare.empty:
        return
    shown = ", ".join(f"{_show(k)}: {int(v)}" for k, v in rare.iloc[:5].items())
    shown += f", … ({len(rare) - 5} more)" if len(rare) > 5 else ""
    smallest = int(rare.min())
    fix = (
        f"use fewer folds (folds={smallest} or less) or merge the rare classes"
        if smallest >= 2
        else "merge or remove the classes with a single row"
    )
    report.add(
        "target",
        f"target: {len(rare)} of {len(counts)} classes of {spec.target!r} have fewer rows than "
        f"folds={spec.folds} ({shown}); {fix}.",
        spec.target,
    )


def _resolve_metric(spec: SearchSpec, task: Task | None, report: _Report) -> SearchSpec | None:
    if task is None:
        return None
    try:
        return spec.resolved(task)
    except InvalidSpecError as exc:
        report.add(exc.field or "metric", str(exc), exc.value, spec=True)
        return None


def _select_features(frame: pd.DataFrame, spec: SearchSpec, report: _Report) -> list[str]:
    """Feature columns, after dropping all-missing, constant and id-like ones."""
    reserved = {spec.target, spec.group_column, spec.order_column}
    candidates = [c for c in frame.columns if c not in reserved]
    kept = []
    for name in candidates:
        reason = _useless(frame[name]) if len(frame) else None
        if reason is None:
            kept.append(name)
        else:
            report.dropped[name] = reason
            report.warnings.append(f"column {name!r}: dropped from the features: {reason}.")
    if not candidates:
        others = " and the group/order/drop columns" if len(frame.columns) > 1 else ""
        message = f"the table has no feature columns besides the target{others}"
        report.add("data", f"data: {message}; add at least one column to learn from.")
    elif not kept:
        why = "; ".join(f"{c!r} ({reason})" for c, reason in report.dropped.items())
        message = f"no feature columns left after dropping {why}"
        report.add("data", f"data: {message}; add columns that vary and carry information.")
    return kept


def _useless(series: pd.Series) -> str | None:
    """Why a feature cannot help any model, or None."""
    n, n_missing = len(series), int(series.isna().sum())
    if n_missing == n:
        return "all values are missing"
    n_unique = series.nunique() if n_missing == 0 else -1
    if n_unique == 1:
        return f"constant (every row is {_show(series.iloc[0])})"
    if n >= MIN_CHECK_ROWS and n_unique == n:
        values = series.to_numpy()
        if series.dtype == object or bool(np.all(np.round(values) == values)):
            return "id-like (a distinct whole number or text in every row)"
    return None


def _check_split_columns(frame: pd.DataFrame, spec: SearchSpec, report: _Report) -> None:
    """Group and order columns must let the workers build the folds."""
    group, order, folds = spec.group_column, spec.order_column, spec.folds
    for where, name in (("group_column", group), ("order_column", order)):
        if name not in frame.columns or not len(frame):
            continue
        column = frame[name]
        n_missing, n_groups = int(column.isna().sum()), column.nunique()
        if where == "order_column" and column.dtype == object:
            example = _show(column.dropna().iloc[0]) if n_missing < len(column) else "nan"
            fix = "convert it to numbers or datetimes (pd.to_datetime) before submitting"
            report.add(where, f"{where}: column {name!r} holds text ({example}, …); {fix}.", name)
        elif n_missing:
            fix = "fill them (a group of their own is fine) or leave group_column out"
            fix = fix if where == "group_column" else "fill them or drop those rows"
            report.add(
                where, f"{where}: column {name!r} has {n_missing} missing values; {fix}.", name
            )
        if where == "group_column" and n_groups < folds:
            report.add(
                where,
                f"{where}: column {name!r} has {n_groups} groups, fewer than folds={folds}; use "
                f"fewer folds (folds={max(n_groups, 2)} or less) or finer groups.",
                name,
            )


def _build(
    frame: pd.DataFrame,
    features: list[str],
    spec: SearchSpec,
    task: Task,
    report: _Report,
    users: _UserLabels | None = None,
) -> Prepared:
    """Assemble the Prepared record once every check has passed."""
    keep = {*features, spec.target, spec.group_column, spec.order_column}
    frame = frame[[c for c in frame.columns if c in keep]].reset_index(drop=True)
    kinds = {
        c: ColumnKind.CATEGORICAL if frame[c].dtype == object else ColumnKind.NUMERIC
        for c in features
    }
    categorical = tuple(c for c, kind in kinds.items() if kind is ColumnKind.CATEGORICAL)
    levels = {c: frame[c].nunique() for c in categorical}
    high = tuple(c for c in categorical if levels[c] > HIGH_CARDINALITY)
    if high:
        listed = ", ".join(f"{c!r} ({levels[c]} levels)" for c in high)
        report.warnings.append(
            f"columns {listed}: more than {HIGH_CARDINALITY} categories; listed as "
            "high-cardinality so the workers encode them compactly."
        )
    n_dup = int(frame[[*features, spec.target]].duplicated().sum())
    if n_dup:
        report.warnings.append(
            f"data: {n_dup} exact duplicate rows ({n_dup / len(frame):.1%}); copies in different "
            "folds make scores optimistic: remove them or set group_column."
        )
    labels = frame[spec.target].map(_label)
    classes = [] if task is Task.REGRESSION else sorted(labels.unique().tolist())
    return Prepared(
        frame=frame,
        spec=spec,
        task=task.value,
        schema={c: kind.value for c, kind in kinds.items()},
        numeric_columns=tuple(c for c, kind in kinds.items() if kind is ColumnKind.NUMERIC),
        categorical_columns=categorical,
        high_cardinality_columns=high,
        classes=classes,
        base_rate=float((labels == classes[1]).mean()) if task is Task.BINARY else None,
        warnings=report.warnings,
        dropped=report.dropped,
        n_rows=len(frame),
        labels=[users.by_class.get(c, c) for c in classes] if users and classes else classes,
        label_dtype=users.dtype if users and classes else None,
    )
