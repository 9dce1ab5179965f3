"""The user's class labels: kept with their dtype, ambiguous ones refused."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from tuttiml.service.data._common import _label, _Report


@dataclass(frozen=True)
class _UserLabels:
    """The user's own label behind each normalised class label, and their column's dtype."""

    by_class: dict[Any, Any]
    dtype: str


def _raw_column(df: pd.DataFrame, name: str) -> pd.Series:
    """The user's column ``name`` (matched as str, first wins), on a fresh RangeIndex."""
    position = next(i for i, c in enumerate(df.columns) if str(c) == name)
    return df.iloc[:, position].reset_index(drop=True)


def _labels_may_merge(dtype: Any) -> bool:
    """Only text-like columns can hold labels of different types (1 and "1")."""
    if isinstance(dtype, pd.CategoricalDtype):
        return True
    return pd.api.types.is_object_dtype(dtype) or isinstance(dtype, pd.StringDtype)


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
