"""The out-of-fold prediction codec: ``.npy`` bytes, never pickles."""

from __future__ import annotations

import io

import numpy as np


def oof_bytes(oof: np.ndarray) -> bytes:
    """Out-of-fold predictions as ``.npy`` bytes (read back with ``allow_pickle=False``)."""
    buf = io.BytesIO()
    np.save(buf, np.ascontiguousarray(oof, dtype=np.float32), allow_pickle=False)
    return buf.getvalue()


def oof_array(blob: bytes) -> np.ndarray:
    """Out-of-fold predictions from :func:`oof_bytes` bytes (no pickle)."""
    return np.load(io.BytesIO(blob), allow_pickle=False)
