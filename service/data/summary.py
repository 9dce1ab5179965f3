"""The table summary kept on the job record (what the report shows about the data)."""

from __future__ import annotations

from collections import Counter
from typing import Any

import numpy as np
from tuttiml.service.data._common import Prepared, _label
from tuttiml.service.records import ClassShare, FeatureColumns, TableSummary, TargetStats


def summary(prepared: Prepared) -> dict[str, Any]:
    """JSON-friendly description of a prepared table, kept on the job record.

    Holds the row count, target, task and metric, feature columns by kind
    (``columns["high_cardinality"]`` is what the workers read), missing share per feature,
    dropped columns, class balance (records of the user's label, row count and share) and base
    rate (classification) or target statistics (regression), and the warnings.
    """
    frame, spec = prepared.frame, prepared.spec
    y = frame[spec.target]
    n, counts = max(prepared.n_rows, 1), Counter(_label(v) for v in y.to_numpy())
    labels = prepared.labels if len(prepared.labels) == len(prepared.classes) else prepared.classes
    balance = [  # the one shape of class_balance: service.report reads these records
        {"label": label, "count": counts[c], "share": round(counts[c] / n, 6)}
        for c, label in zip(prepared.classes, labels, strict=True)
    ]
    stats = None
    if not prepared.classes:  # regression: the target's spread instead of class balance
        stats = {k: _json_float(getattr(y, k)()) for k in ("mean", "std", "min", "max")}
    return TableSummary(
        rows=prepared.n_rows,
        target=spec.target,
        task=str(prepared.task),
        metric=spec.metric.value if spec.metric else None,
        n_features=len(prepared.schema),
        columns=FeatureColumns(
            numeric=list(prepared.numeric_columns),
            categorical=list(prepared.categorical_columns),
            high_cardinality=list(prepared.high_cardinality_columns),
        ),
        schema=dict(prepared.schema),
        missing_share={c: round(float(frame[c].isna().mean()), 6) for c in prepared.schema},
        dropped=dict(prepared.dropped),
        classes=list(prepared.classes),
        class_balance=[ClassShare(**b) for b in balance] or None,
        base_rate=prepared.base_rate,
        target_stats=TargetStats(**stats) if stats else None,
        warnings=list(prepared.warnings),
    ).dump()


def _json_float(value: Any) -> float | None:
    number = float(value)
    return number if np.isfinite(number) else None
