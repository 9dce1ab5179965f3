"""Leakage checks: features that reproduce the target (near-perfect rank correlation)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from tuttiml.service.data._common import LEAK_RHO, MIN_CHECK_ROWS, _Report
from tuttiml.service.spec import SearchSpec


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
