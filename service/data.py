"""The data boundary: read, normalise, check and encode a user's table before anything is stored.

The client runs every table through :func:`prepare` before it writes anything, so a bad table
fails on the user's machine with one error that lists every problem found. Workers only ever see
the normalised frame (via :func:`encode` / :func:`decode`), where

* numeric columns are ``float64`` holding ``np.nan`` for missing values (booleans become 0/1,
  datetimes seconds since 1970-01-01 UTC, timedeltas seconds);
* categorical columns are ``object`` holding Python ``str`` and ``np.nan`` for missing values
  (pandas ``category``, ``string``/``str`` and object columns of text or mixed values).

Error classes: problems with the table itself (empty, duplicated names, missing columns, leaks,
infinite values, rare classes) raise :class:`~service.errors.InvalidDataError`; a spec field the
table contradicts (``task``, ``metric``) raises :class:`~service.errors.InvalidSpecError`. When
both kinds occur together, the one error raised is an ``InvalidDataError``.
"""

from __future__ import annotations

import difflib
import enum
import hashlib
import os
import warnings
import zlib
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
from tuttiml.service.errors import InvalidDataError, InvalidSpecError
from tuttiml.service.spec import SearchSpec, Task

from tuttiml._timeunits import DURATION, time_kind, to_seconds

__all__ = [
    "HIGH_CARDINALITY",
    "MAX_INTEGER_CLASSES",
    "ColumnKind",
    "Prepared",
    "check_size",
    "decode",
    "digest",
    "encode",
    "normalize_frame",
    "prepare",
    "read_table",
    "summary",
]

#: Categorical features with more distinct values than this are listed as high-cardinality.
HIGH_CARDINALITY = 30
#: With ``task="auto"``, a numeric target of whole numbers with 3..this many distinct values is
#: treated as multiclass; more distinct values (or fractions) mean regression.
MAX_INTEGER_CLASSES = 20
#: Spearman |rho| at or above this marks a numeric feature as a monotone transform of the target.
LEAK_RHO = 0.9999
#: Leak and id-like checks need this many rows; on fewer rows a perfect match is mere chance.
MIN_CHECK_ROWS = 8

CSV_SUFFIXES = (".csv", ".csv.gz")
PARQUET_SUFFIXES = (".parquet", ".pq")
_SUFFIXES = ", ".join(CSV_SUFFIXES + PARQUET_SUFFIXES)
_NUMERIC_KINDS = frozenset(
    {"integer", "floating", "mixed-integer-float", "decimal", "boolean", "empty"}
)
_TIME_KINDS = frozenset({"datetime64", "datetime", "date", "timedelta"})


class ColumnKind(enum.StrEnum):
    """How the workers treat a feature column."""

    NUMERIC = "numeric"
    CATEGORICAL = "categorical"


@dataclass(frozen=True, eq=False)
class Prepared:
    """A checked table ready to store, with what the search needs to know about it.

    Attributes:
        frame: normalised feature columns, the group/order column the spec names (kept for the
            fold assignment, not a feature) and the target; dropped columns and rows with a
            missing target removed; a fresh ``RangeIndex``.
        spec: the spec with ``task`` and ``metric`` resolved.
        task: the resolved task's value (``"binary"``, ``"multiclass"`` or ``"regression"``).
        schema: feature column -> ``"numeric"`` or ``"categorical"``, in table order.
        numeric_columns: numeric feature columns.
        categorical_columns: categorical feature columns (including high-cardinality ones).
        high_cardinality_columns: categorical features with more than ``HIGH_CARDINALITY``
            levels.
        classes: sorted class labels (``int`` for whole numbers, else ``float`` or ``str``);
            empty for regression.
        base_rate: binary only: share of rows in the positive class (``classes[1]``).
        warnings: things the user should know that did not stop the job.
        dropped: column -> why it is not a feature.
        n_rows: number of rows in ``frame``.
        labels: classification only: the user's own label of each of ``classes``, as it was
            in their column (``False``/``True`` for a boolean target, ``1.0`` for a float one,
            ``3`` for a category of numbers), so predictions can give them back.
        label_dtype: numpy dtype name of the predictions that give back ``labels``
            (``"bool"``, ``"int32"``, ``"float64"``, ``"object"``…); None for regression or
            when a label has no plain JSON form (predictions then give the normalised labels).
    """

    frame: pd.DataFrame
    spec: SearchSpec
    task: str
    schema: dict[str, str]
    numeric_columns: tuple[str, ...]
    categorical_columns: tuple[str, ...]
    high_cardinality_columns: tuple[str, ...]
    classes: list[Any]
    base_rate: float | None
    warnings: list[str]
    dropped: dict[str, str]
    n_rows: int
    labels: list[Any] = field(default_factory=list)
    label_dtype: str | None = None


@dataclass(frozen=True)
class _Problem:
    """One thing wrong with the table, or with a spec field the table contradicts."""

    field: str  # the spec field or column the problem is about; starts the message
    message: str
    value: Any = None
    spec: bool = False  # True: a spec field is at fault (InvalidSpecError)


@dataclass
class _Report:
    """Problems, warnings and dropped columns collected while checking one table."""

    problems: list[_Problem] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    dropped: dict[str, str] = field(default_factory=dict)

    def add(self, field: str, message: str, value: Any = None, *, spec: bool = False) -> None:
        self.problems.append(_Problem(field, message, value, spec))

    def raise_problems(self) -> None:
        """Raise one error listing every problem, if there is any."""
        if not self.problems:
            return
        first, lines = self.problems[0], [p.message for p in self.problems]
        head = f"the table cannot be searched ({len(lines)} problems):\n  "
        message = lines[0] if len(lines) == 1 else head + "\n  ".join(lines)
        if all(p.spec for p in self.problems):
            raise InvalidSpecError(message, field=first.field, value=first.value, problems=lines)
        raise InvalidDataError(message, field=first.field, value=first.value)


def _data_error(message: str, value: Any = None) -> InvalidDataError:
    """An error about the table as a whole (``field="data"``)."""
    return InvalidDataError(message, field="data", value=value)


# --------------------------------------------------------------------------------------------
# Reading


def read_table(source: pd.DataFrame | str | os.PathLike[str]) -> pd.DataFrame:
    """Load the user's table from a DataFrame or a CSV/Parquet file.

    Args:
        source: a DataFrame (returned as a shallow copy, so renaming columns later does not
            touch the caller's object) or a path ending in .csv, .csv.gz, .parquet or .pq.

    Returns:
        The table as pandas read it (not yet normalised; see :func:`normalize_frame`).

    Raises:
        InvalidDataError: ``field="data"``: wrong type, unknown extension, no such file, or a
            file that cannot be parsed.
    """
    if isinstance(source, pd.DataFrame):
        return source.copy(deep=False)
    if not isinstance(source, (str, os.PathLike)):
        got = type(source).__name__
        raise _data_error(
            f"data: expected a pandas DataFrame or a path to a {_SUFFIXES} file (got {got}); "
            "pass one of those.",
            got,
        )
    path = Path(source)
    lower = path.name.lower()
    if not lower.endswith(CSV_SUFFIXES + PARQUET_SUFFIXES):
        raise _data_error(
            f"data: unsupported file type for {str(path)!r} (suffix {path.suffix or 'none'!r}); "
            f"save the table as {_SUFFIXES} or pass a pandas DataFrame.",
            str(path),
        )
    if not path.is_file():
        raise _data_error(
            f"data: no file at {str(path)!r}; check the path (relative paths start from "
            f"{str(Path.cwd())!r}).",
            str(path),
        )
    is_csv = lower.endswith(CSV_SUFFIXES)
    try:
        if is_csv:
            return pd.read_csv(path, low_memory=False)
        return pd.read_parquet(path)
    except pd.errors.EmptyDataError as exc:
        message = f"data: {str(path)!r} is empty; write a header row and rows of data."
        raise _data_error(message, str(path)) from exc
    except (ValueError, OSError, EOFError, zlib.error, pa.ArrowException) as exc:
        kind, fix = (
            ("CSV", "check it is UTF-8, comma-separated text with a header row, or use Parquet")
            if is_csv
            else ("Parquet", "check the file is complete or save it again with to_parquet()")
        )
        raise _data_error(
            f"data: {str(path)!r} could not be read as {kind} ({type(exc).__name__}: "
            f"{_short(exc)}); {fix}.",
            str(path),
        ) from exc


def _short(exc: BaseException, limit: int = 160) -> str:
    text = " ".join(str(exc).split())
    return text if len(text) <= limit else text[: limit - 1] + "…"


# --------------------------------------------------------------------------------------------
# Normalising


def normalize_frame(df: pd.DataFrame) -> pd.DataFrame:
    """Give every column one of the two representations the rest of tutti relies on.

    Numeric columns become ``float64`` with ``np.nan``; everything text-like becomes ``object``
    holding ``str`` with ``np.nan`` (see the module docstring for the full rules; an object
    column without a single value counts as numeric). Column names
    become ``str`` and the index a fresh ``RangeIndex``. Conversions worth knowing about
    (datetimes to seconds) are reported with :func:`warnings.warn`.

    Raises:
        InvalidDataError: column names that collide once made ``str``, infinite values, or
            complex numbers; one error naming every such column.
    """
    frame, report = _normalize(df)
    report.raise_problems()
    for note in report.warnings:
        warnings.warn(note, UserWarning, stacklevel=2)
    return frame


def _normalize(df: pd.DataFrame) -> tuple[pd.DataFrame, _Report]:
    """Normalise the columns, collecting problems instead of raising (first name wins)."""
    report = _Report()
    names = [str(c) for c in df.columns]
    repeated = {n: k for n, k in Counter(names).items() if k > 1}
    if repeated:
        listed = ", ".join(f"{n!r} ({k} times)" for n, k in repeated.items())
        report.add(
            "data",
            f"data: duplicated column names {listed}; rename them so every column name is "
            "unique (names are compared as str, so 1 and '1' collide).",
            sorted(repeated),
        )
    index = pd.RangeIndex(len(df))
    columns: dict[str, pd.Series] = {}
    for position, name in enumerate(names):
        if name in columns:
            continue
        values = _normalize_column(name, df.iloc[:, position], report)
        columns[name] = pd.Series(values, index=index, dtype=values.dtype, name=name)
    return pd.DataFrame(columns, index=index) if columns else pd.DataFrame(index=index), report


def _normalize_column(name: str, series: pd.Series, report: _Report) -> np.ndarray:
    """One column as float64 or object-of-str; infinities are reported and set to NaN."""
    dtype = series.dtype
    if isinstance(dtype, pd.SparseDtype):
        series = series.sparse.to_dense()
        dtype = series.dtype
    if pd.api.types.is_complex_dtype(dtype):
        return _complex_problem(name, report, len(series))
    if isinstance(dtype, pd.CategoricalDtype):  # labels from the categories: 1 stays "1"
        labels = np.array([*map(_text, dtype.categories), np.nan], dtype=object)
        return np.asarray(labels[series.cat.codes.to_numpy()])  # code -1 (missing) -> nan
    if isinstance(dtype, pd.StringDtype):
        return _as_text(series)
    if pd.api.types.is_bool_dtype(dtype) or pd.api.types.is_numeric_dtype(dtype):
        values = series.to_numpy(dtype="float64", na_value=np.nan)
    elif dtype.kind in ("m", "M"):
        values = _seconds(name, series, report)
        if values is None:  # pragma: no cover - datetime64/timedelta64 dtypes always convert
            return _as_text(series)
    else:
        values = _from_objects(name, series.astype(object), report)
        if values.dtype == object:
            return values
    return _finite(name, values, report)


def _from_objects(name: str, series: pd.Series, report: _Report) -> np.ndarray:
    """Infer what an object column holds: numbers, booleans, datetimes or text."""
    kind = pd.api.types.infer_dtype(series, skipna=True)
    if kind in _NUMERIC_KINDS:
        try:
            return series.to_numpy(dtype="float64", na_value=np.nan)
        except (TypeError, ValueError, OverflowError):
            return _as_text(series)
    if kind == "complex":
        return _complex_problem(name, report, len(series))
    if kind not in _TIME_KINDS:
        return _as_text(series)
    seconds = _seconds(name, series, report)  # None for mixed time zones or odd values
    return _as_text(series) if seconds is None else seconds


def _as_text(series: pd.Series) -> np.ndarray:
    """Object array of Python str with np.nan for every kind of missing value."""
    raw = series.to_numpy(dtype=object)
    missing = pd.isna(raw)
    if pd.api.types.infer_dtype(raw, skipna=True) == "string":  # fast path: already text
        return np.where(missing, np.nan, raw).astype(object)
    out = np.empty(len(raw), dtype=object)
    out[:] = [np.nan if gone else _text(v) for v, gone in zip(raw, missing, strict=True)]
    return out


def _text(value: Any) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    return str(value)


def _seconds(name: str, series: pd.Series, report: _Report) -> np.ndarray | None:
    """Datetimes as seconds since 1970-01-01 UTC (naive ones read as UTC); durations as seconds.

    The rule lives in :mod:`tuttiml._timeunits`, shared with the exported pipelines'
    ``FrameNormalizer`` so predicting on the user's own rows sees the same numbers. None when
    the column is not datetimes or durations after all (then it stays text).
    """
    kind = time_kind(series, pd)
    seconds = to_seconds(series, pd)
    if seconds is None:
        return None
    if kind == DURATION:
        report.warnings.append(f"column {name!r}: durations converted to seconds.")
    else:
        report.warnings.append(
            f"column {name!r}: datetimes converted to seconds since 1970-01-01 UTC "
            "(times without a time zone read as UTC)."
        )
    return seconds


def _finite(name: str, values: np.ndarray, report: _Report) -> np.ndarray:
    infinite = np.isinf(values)
    if infinite.any():
        rows = np.flatnonzero(infinite)
        report.add(
            name,
            f"column {name!r}: {len(rows)} infinite values (first at row {rows[0]}); replace "
            "them with missing values (NaN) or finite numbers.",
        )
        values = np.where(infinite, np.nan, values)
    return values


def _complex_problem(name: str, report: _Report, n: int) -> np.ndarray:
    report.add(
        name,
        f"column {name!r}: complex numbers are not supported; split them into real and "
        "imaginary columns or drop the column.",
    )
    return np.full(n, np.nan)


# --------------------------------------------------------------------------------------------
# Checking


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
        n_problems = len(report.problems)
        if len(frame):  # labels that merge would also read as fewer classes: check them first
            users = _user_labels(_raw_column(df, spec.target)[kept], frame[spec.target], report)
        if len(frame) and len(report.problems) == n_problems:
            task = _resolve_task(frame[spec.target], spec, report)
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


def _did_you_mean(name: str, columns: Sequence[str]) -> str:
    by_lower = {c.lower(): c for c in columns}
    close = difflib.get_close_matches(name.lower(), list(by_lower), n=3, cutoff=0.6)
    if not close:
        return ""
    return "; did you mean " + " or ".join(repr(by_lower[c]) for c in close) + "?"


def _listing(columns: Sequence[str], limit: int = 8) -> str:
    more = len(columns) - limit
    return ", ".join(map(repr, columns[:limit])) + (f", … ({more} more)" if more > 0 else "")


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


@dataclass(frozen=True)
class _UserLabels:
    """The user's own label behind each normalised class label, and their column's dtype."""

    by_class: dict[Any, Any]
    dtype: str


def _raw_column(df: pd.DataFrame, name: str) -> pd.Series:
    """The user's column ``name`` (matched as str, first wins), on a fresh RangeIndex."""
    position = next(i for i, c in enumerate(df.columns) if str(c) == name)
    return df.iloc[:, position].reset_index(drop=True)


def _user_labels(raw: pd.Series, y: pd.Series, report: _Report) -> _UserLabels | None:
    """Map each class the workers see back to the user's label; refuse labels that merge.

    Normalising reads 1 and "1" in one object column both as the class "1" (and 1.0 and
    "1.0" alike): the table would silently lose a class. Such labels are a problem naming
    the target. Returns None when a label has no plain JSON form (then predictions give the
    normalised labels).
    """
    target = str(y.name)
    values = raw.astype(object).to_numpy() if isinstance(raw.dtype, pd.CategoricalDtype) else raw
    originals = np.asarray(values, dtype=object)
    codes, uniques = pd.factorize(originals)  # by value and type: 1 and "1" stay apart
    first = np.unique(codes, return_index=True)[1]
    by_class: dict[Any, Any] = {}
    merged: dict[Any, list[Any]] = {}
    for original, seen in zip(uniques, y.to_numpy()[first], strict=True):
        label = _label(seen)
        if label in by_class:
            merged.setdefault(label, [by_class[label]]).append(original)
        else:
            by_class[label] = original
    if merged:
        groups = list(merged.values())[:3]
        shown = "; ".join(" and ".join(repr(_plain(v)) for v in group) for group in groups)
        report.add(
            "target",
            f"target: column {target!r} holds labels that differ only in type ({shown}), which "
            "would merge into one class; make the labels one type, e.g. "
            f"df[{target!r}] = df[{target!r}].astype(str), or map them to the classes you mean.",
            target,
        )
        return None
    plain = {k: _plain(v) for k, v in by_class.items()}
    if any(v is _NOT_PLAIN for v in plain.values()):
        return None
    return _UserLabels(plain, _label_dtype(raw.dtype))


_NOT_PLAIN = object()


def _plain(value: Any) -> Any:
    """A label as a JSON-friendly Python value (bool, int, float or str), or ``_NOT_PLAIN``."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    return value if isinstance(value, (bool, int, float, str)) else _NOT_PLAIN


def _label_dtype(dtype: Any) -> str:
    """The numpy dtype name predictions take to give back labels of a column of ``dtype``."""
    if isinstance(dtype, pd.CategoricalDtype):
        return _label_dtype(dtype.categories.dtype)
    if pd.api.types.is_bool_dtype(dtype):
        return "bool"
    numpy_dtype = getattr(dtype, "numpy_dtype", dtype)  # Int64 -> int64, Float64 -> float64
    if isinstance(numpy_dtype, np.dtype) and numpy_dtype.kind in "iuf":
        return numpy_dtype.name
    return "object"


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


def _check_leaks(
    frame: pd.DataFrame, features: list[str], spec: SearchSpec, report: _Report
) -> list[str]:
    """Refuse (or, with allow_leaks, warn about) features that give the target away."""
    y, kept = frame[spec.target], []
    y_ranks = y.rank().to_numpy() if y.dtype.kind == "f" else None  # ranked once for Spearman
    for name in features:
        how = _leak(frame[name], y, y_ranks)
        if how is None or spec.allow_leaks:
            kept.append(name)
        if how is not None and spec.allow_leaks:
            report.warnings.append(
                f"column {name!r}: looks like a target leak ({how} {spec.target!r}); kept "
                "because allow_leaks=True."
            )
        elif how is not None:
            report.add(
                name,
                f"column {name!r}: {how} the target {spec.target!r}, a target leak; drop the "
                "column (drop_columns) or set allow_leaks=True if it is known at prediction "
                "time.",
            )
    return kept


def _leak(feature: pd.Series, y: pd.Series, y_ranks: np.ndarray | None) -> str | None:
    """How ``feature`` gives ``y`` away (copy, monotone transform, one-to-one map), or None.

    ``y_ranks`` (numeric targets only) are the target's ranks over all rows, reused when the
    feature has no missing values.
    """
    both = feature.notna().to_numpy()
    if both.sum() < MIN_CHECK_ROWS:
        return None
    f, t = (feature, y) if both.all() else (feature[both], y[both])
    if f.dtype == t.dtype and np.array_equal(f.to_numpy(), t.to_numpy()):
        return "is a copy of"
    if y_ranks is not None and f.dtype.kind == "f":
        rho = _pearson(f.rank().to_numpy(), y_ranks if both.all() else t.rank().to_numpy())
        if abs(rho) >= LEAK_RHO:
            return f"is a monotone transform (Spearman rho={rho:+.4f}) of"
    n_levels = f.nunique()
    if 2 <= n_levels < len(f) and n_levels == t.nunique():
        pairs = pd.DataFrame({"f": f.to_numpy(), "t": t.to_numpy()})
        if len(pairs.drop_duplicates()) == n_levels:
            return "maps one-to-one onto"
    return None


def _pearson(a: np.ndarray, b: np.ndarray) -> float:
    """Pearson's r (Spearman's rho when given ranks); 0 when either side is constant."""
    a, b = a - a.mean(), b - b.mean()
    denom = float(np.sqrt((a * a).sum() * (b * b).sum()))
    return float((a * b).sum() / denom) if denom > 0 else 0.0


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


def _show(value: Any) -> str:
    """A value as quoted in a message (floats to 6 significant digits)."""
    value = _label(value)
    return f"{value:.6g}" if isinstance(value, float) else repr(value)


def _label(value: Any) -> Any:
    """A JSON-friendly class label or example value: whole floats become int."""
    if isinstance(value, (float, np.floating)):
        return int(value) if float(value).is_integer() else float(value)
    if isinstance(value, np.generic):
        return value.item()
    return value


# --------------------------------------------------------------------------------------------
# Storage format


def encode(df: pd.DataFrame) -> bytes:
    """Parquet bytes (zstd, no index) of a normalised frame, as stored once per table.

    Raises:
        InvalidDataError: a column pyarrow cannot store (normalise the frame first).
    """
    try:
        table = pa.Table.from_pandas(df, preserve_index=False)
    except (pa.ArrowException, TypeError, ValueError) as exc:
        message = f"data: the table cannot be written as Parquet ({_short(exc)})"
        raise _data_error(f"{message}; pass it through normalize_frame() first.") from exc
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd")
    return bytes(sink.getvalue().to_pybytes())


def decode(data: bytes | bytearray) -> pd.DataFrame:
    """The frame :func:`encode` stored, with text columns back as object-of-str with NaN.

    pandas 3 reads Parquet strings as its ``str`` dtype (and all-missing columns as ``None``);
    both are turned back into ``object`` columns with ``np.nan`` so ``decode(encode(df))``
    equals a normalised ``df``.

    Raises:
        InvalidDataError: the bytes are not a Parquet table.
    """
    return table_frame(parquet_table(data))


def parquet_table(data: bytes | bytearray) -> pa.Table:
    """The Arrow table of stored Parquet bytes; the bytes may be freed once this returns.

    Raises:
        InvalidDataError: the bytes are not a Parquet table.
    """
    try:
        return pq.read_table(pa.BufferReader(data))
    except (pa.ArrowException, OSError) as exc:
        message = f"data: the stored table is not valid Parquet ({_short(exc)})"
        raise _data_error(f"{message}; submit the job again.") from exc


def table_frame(table: pa.Table) -> pd.DataFrame:
    """A pandas frame of a decoded Arrow table, consuming the table (see :func:`decode`).

    Text columns become object arrays that point at one Python ``str`` per distinct value
    (8 bytes a row rather than a string object per row), so a million-row categorical costs
    8 MB, not 60.
    """
    n = table.num_rows
    text: dict[str, np.ndarray] = {}
    for i, (name, kind) in enumerate(zip(table.column_names, table.schema.types, strict=True)):
        if pa.types.is_string(kind) or pa.types.is_large_string(kind) or pa.types.is_null(kind):
            text[name] = _shared_text(table.column(i), n)
            table = table.set_column(i, name, pa.nulls(n, pa.int8()))
    # free Arrow buffers while converting: peak memory stays near one copy of the table
    frame = table.to_pandas(self_destruct=True, split_blocks=True)
    del table
    for name, values in text.items():
        frame[name] = pd.Series(values, index=frame.index, dtype=object)
    return frame


def _shared_text(column: pa.ChunkedArray, n: int) -> np.ndarray:
    """Object array of str (np.nan where missing) sharing one str object per distinct value."""
    if pa.types.is_null(column.type) or column.null_count == n:
        return np.full(n, np.nan, dtype=object)
    encoded = column.combine_chunks().dictionary_encode()
    levels = encoded.dictionary.to_pylist()
    lookup = np.empty(len(levels) + 1, dtype=object)
    lookup[: len(levels)] = [_text(v) for v in levels]
    lookup[len(levels)] = np.nan
    codes = pc.fill_null(encoded.indices, len(levels)).to_numpy(zero_copy_only=False)
    return lookup[codes]


def digest(data: bytes) -> str:
    """SHA-256 hex digest: the content key a table is stored under."""
    return hashlib.sha256(data).hexdigest()


def check_size(n_bytes: int, max_bytes: int) -> None:
    """Refuse an encoded table larger than the upload cap.

    Raises:
        InvalidDataError: ``field="data"``, sizes in MB and how to get under the cap.
    """
    if n_bytes <= max_bytes:
        return
    raise _data_error(
        f"data: the encoded table is {n_bytes / 2**20:,.2f} MB ({n_bytes:,} bytes), over the "
        f"upload limit of {max_bytes / 2**20:,.2f} MB; raise TUTTI_MAX_UPLOAD_BYTES or sample "
        "rows (e.g. df.sample(n=100_000, random_state=0)).",
        n_bytes,
    )


# --------------------------------------------------------------------------------------------
# Summary


def summary(prepared: Prepared) -> dict[str, Any]:
    """JSON-friendly description of a prepared table, kept on the job record.

    Holds the row count, target, task and metric, feature columns by kind
    (``columns["high_cardinality"]`` is what the workers read), missing share per feature,
    dropped columns, class balance (records of the user's label, row count and share) and base
    rate (classification) or target statistics (regression), and the warnings.
    """
    frame, spec = prepared.frame, prepared.spec
    y = frame[spec.target]
    n, counts = max(prepared.n_rows, 1), Counter(_label(v) for v in y.to_numpy())
    labels = prepared.labels if len(prepared.labels) == len(prepared.classes) else prepared.classes
    balance = [  # the one shape of class_balance: service.report reads these records
        {"label": label, "count": counts[c], "share": round(counts[c] / n, 6)}
        for c, label in zip(prepared.classes, labels, strict=True)
    ]
    stats = None
    if not prepared.classes:  # regression: the target's spread instead of class balance
        stats = {k: _json_float(getattr(y, k)()) for k in ("mean", "std", "min", "max")}
    return {
        "rows": prepared.n_rows,
        "target": spec.target,
        "task": prepared.task,
        "metric": spec.metric.value if spec.metric else None,
        "n_features": len(prepared.schema),
        "columns": {
            "numeric": list(prepared.numeric_columns),
            "categorical": list(prepared.categorical_columns),
            "high_cardinality": list(prepared.high_cardinality_columns),
        },
        "schema": dict(prepared.schema),
        "missing_share": {c: round(float(frame[c].isna().mean()), 6) for c in prepared.schema},
        "dropped": dict(prepared.dropped),
        "classes": list(prepared.classes),
        "class_balance": balance or None,
        "base_rate": prepared.base_rate,
        "target_stats": stats,
        "warnings": list(prepared.warnings),
    }


def _json_float(value: Any) -> float | None:
    number = float(value)
    return number if np.isfinite(number) else None
