"""Reading a user's table from a DataFrame, CSV or Parquet path."""

from __future__ import annotations

import os
import zlib
from pathlib import Path

import pandas as pd
import pyarrow as pa
from tuttiml.service.data._common import (
    _SUFFIXES,
    CSV_SUFFIXES,
    PARQUET_SUFFIXES,
    _data_error,
    _short,
)


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
