"""The two steps of greedy portfolio construction (numpy only, so tests can check them).

``normalise`` puts each table's scores on one scale; ``greedy`` orders the configurations.
``portfolio_study.py`` feeds them the configurations × tables matrix of CV scores.
"""

from __future__ import annotations

import numpy as np


def normalise(scores: np.ndarray) -> np.ndarray:
    """Per column (table): (score − median) / (best − median), clipped to [0, 1]; NaN -> 0."""
    out = np.zeros_like(scores, dtype=float)
    for t in range(scores.shape[1]):
        col = scores[:, t]
        ok = np.isfinite(col)
        if not ok.any():
            continue
        best, med = float(np.max(col[ok])), float(np.median(col[ok]))
        if best > med:
            out[ok, t] = np.clip((col[ok] - med) / (best - med), 0.0, 1.0)
        else:
            out[ok, t] = (col[ok] >= best).astype(float)
    return out


def greedy(norm: np.ndarray, cost: np.ndarray, size: int) -> list[tuple[int, float, float]]:
    """Greedy portfolio: (candidate index, gain, mean best-normalised score after) per step.

    Each step adds the candidate that most raises the mean over tables of the best normalised
    score in the portfolio; ties go to the lower cost, then the lower index. Stops at
    ``size`` or when nothing adds anything.
    """
    chosen: list[tuple[int, float, float]] = []
    current = np.zeros(norm.shape[1])
    for _ in range(min(size, norm.shape[0])):
        value = np.maximum(current, norm).mean(axis=1)
        value[[c for c, _, _ in chosen]] = -np.inf
        order = np.lexsort((np.arange(len(value)), cost, -np.round(value, 12)))
        pick = int(order[0])
        gain = float(value[pick] - current.mean())
        if chosen and gain <= 1e-12:
            break
        current = np.maximum(current, norm[pick])
        chosen.append((pick, gain, float(current.mean())))
    return chosen
