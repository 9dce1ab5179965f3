"""Normalising a table: numeric columns to float64 with NaN, text columns to str with NaN."""

from __future__ import annotations

import warnings
from collections import Counter
from typing import Any

import numpy as np
import pandas as pd
from tuttiml.service.data._common import _NUMERIC_KINDS, _TIME_KINDS, _Report

from tuttiml._timeunits import DURATION, time_kind, to_seconds


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
