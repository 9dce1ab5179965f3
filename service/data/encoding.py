"""Encoding the normalised table as Parquet bytes, and decoding it on the workers."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
from tuttiml.service.data._common import _data_error, _short
from tuttiml.service.data.normalizing import _text


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
