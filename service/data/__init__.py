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

from tuttiml.service.data._common import (
    HIGH_CARDINALITY,
    MAX_INTEGER_CLASSES,
    ColumnKind,
    Prepared,
)
from tuttiml.service.data.checking import prepare
from tuttiml.service.data.encoding import (
    check_size,
    decode,
    digest,
    encode,
    parquet_table,
    table_frame,
)
from tuttiml.service.data.normalizing import normalize_frame
from tuttiml.service.data.reading import read_table
from tuttiml.service.data.summary import summary

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
    "parquet_table",
    "prepare",
    "read_table",
    "summary",
    "table_frame",
]
