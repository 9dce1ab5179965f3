"""The one rule that turns datetime and duration columns into numbers: seconds.

Both sides of a job use it: ``service.data`` when it normalises the user's table before the
search, and ``FrameNormalizer`` (the first step of every exported pipeline) when the user
predicts on rows of their own. One function means the features at prediction time are the
features the model was trained on, whatever unit or time zone the column carries.

Imports only numpy (pandas is passed in by the caller), so exported pipelines stay light.
"""

from __future__ import annotations

from types import ModuleType
from typing import Any

import numpy as np

__all__ = ["DATETIME", "DURATION", "time_kind", "to_seconds"]

DATETIME = "datetime"
DURATION = "duration"
_DATETIME_KINDS = frozenset({"datetime64", "datetime", "date"})


def time_kind(series: Any, pd: ModuleType) -> str | None:
    """``"datetime"``, ``"duration"`` or None: what a column holds, judged by dtype or values.

    A datetime64 (any unit, with or without a time zone) or timedelta64 dtype decides at once;
    an ``object`` column counts when every non-missing value is a datetime, date or timedelta.
    """
    kind = getattr(series.dtype, "kind", None)
    if kind == "M":
        return DATETIME
    if kind == "m":
        return DURATION
    if series.dtype != object:
        return None
    inferred = pd.api.types.infer_dtype(series, skipna=True)
    if inferred in _DATETIME_KINDS:
        return DATETIME
    return DURATION if inferred == "timedelta" else None


def to_seconds(series: Any, pd: ModuleType) -> np.ndarray | None:
    """Datetimes as seconds since 1970-01-01 UTC, durations as seconds, float64 with NaN.

    Times without a time zone are read as UTC. Returns None when the column holds neither
    datetimes nor durations, or holds values pandas cannot read as one kind (e.g. mixed time
    zones in an ``object`` column): the caller then treats the column as it would otherwise.

    Args:
        series: a pandas Series.
        pd: the pandas module (passed in so this module imports only numpy).
    """
    kind = time_kind(series, pd)
    if kind is None:
        return None
    try:
        if kind == DATETIME:
            stamps = pd.to_datetime(series, utc=True)
            # the epoch in the column's own unit: no overflow for dates far from 1970
            span = stamps - pd.Timestamp(0, tz="UTC").as_unit(stamps.dt.unit)
        else:
            span = pd.to_timedelta(series)
    except (TypeError, ValueError, OverflowError):
        return None
    seconds = span / pd.Timedelta(seconds=1)
    return np.asarray(seconds.to_numpy(dtype="float64", na_value=np.nan))
