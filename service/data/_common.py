"""Shared pieces of the data boundary: limits, the prepared-table type, problem collection."""

from __future__ import annotations

import difflib
import enum
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from tuttiml.service.errors import InvalidDataError, InvalidSpecError
from tuttiml.service.spec import SearchSpec

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


def _short(exc: BaseException, limit: int = 160) -> str:
    text = " ".join(str(exc).split())
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _did_you_mean(name: str, columns: Sequence[str]) -> str:
    by_lower = {c.lower(): c for c in columns}
    close = difflib.get_close_matches(name.lower(), list(by_lower), n=3, cutoff=0.6)
    if not close:
        return ""
    return "; did you mean " + " or ".join(repr(by_lower[c]) for c in close) + "?"


def _listing(columns: Sequence[str], limit: int = 8) -> str:
    more = len(columns) - limit
    return ", ".join(map(repr, columns[:limit])) + (f", … ({more} more)" if more > 0 else "")


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
