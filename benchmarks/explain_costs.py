"""Print what the honesty and explanation reports cost: BBC-CV and bias/variance decompositions.

Run: ``.venv/bin/python benchmarks/explain_costs.py [--rows 1000] [--candidates 2000]``.
The BBC-CV target is 2,000 candidates × 1,000 rows of binary ROC AUC within a few seconds.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from sklearn.datasets import make_classification, make_regression
from sklearn.ensemble import BaggingClassifier, RandomForestRegressor
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.tree import DecisionTreeClassifier
from tuttiml.workers.biasvar import bias_variance, holdout_split
from tuttiml.workers.honesty import bbc_cv


def _bbc(rows: int, candidates: int, n_boot: int, metric: str) -> None:
    rng = np.random.default_rng(0)
    y = rng.integers(0, 2, rows)
    scores = rng.random((rows, candidates))
    preds = [np.column_stack([1.0 - scores[:, j], scores[:, j]]) for j in range(candidates)]
    start = time.perf_counter()
    out = bbc_cv(preds, y, metric, n_boot=n_boot, seed=0)
    took = time.perf_counter() - start
    print(
        f"bbc_cv {metric:<9} {candidates} candidates x {rows} rows x {n_boot} boots: "
        f"{took:6.2f} s  (winner_cv {out['winner_cv']:.3f}, estimate {out['estimate']:.3f})"
    )


def _biasvar(rounds: int) -> None:
    Xc, yc = make_classification(n_samples=300, n_features=10, random_state=0)
    Xr, yr = make_regression(n_samples=300, n_features=10, noise=10.0, random_state=0)
    tr_c, te_c = holdout_split(len(yc), yc, "binary", seed=0)
    tr_r, te_r = holdout_split(len(yr), yr, "regression", seed=0)
    cases = [
        ("deep tree", DecisionTreeClassifier(random_state=0), "0-1_loss"),
        (
            "bagged trees (15)",
            BaggingClassifier(DecisionTreeClassifier(), n_estimators=15, random_state=0),
            "0-1_loss",
        ),
        ("logistic regression", LogisticRegression(max_iter=500), "0-1_loss"),
        ("ridge", Ridge(), "mse"),
        ("random forest (20)", RandomForestRegressor(n_estimators=20, random_state=0), "mse"),
    ]
    for name, est, loss in cases:
        X, y, tr, te = (Xc, yc, tr_c, te_c) if loss == "0-1_loss" else (Xr, yr, tr_r, te_r)
        start = time.perf_counter()
        out = bias_variance(est, X[tr], y[tr], X[te], y[te], loss=loss, rounds=rounds, seed=0)
        took = time.perf_counter() - start
        print(
            f"bias_variance {name:<20} {rounds} rounds: {took:6.2f} s  "
            f"(loss {out['expected_loss']:.3f}, bias {out['bias']:.3f}, "
            f"variance {out['variance']:.3f})"
        )


def main() -> None:
    """Parse the sizes and print the timings."""
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=1000)
    parser.add_argument("--candidates", type=int, default=2000)
    parser.add_argument("--n-boot", type=int, default=500)
    parser.add_argument("--rounds", type=int, default=50)
    args = parser.parse_args()
    for metric in ("roc_auc", "accuracy", "log_loss"):
        _bbc(args.rows, args.candidates, args.n_boot, metric)
    _biasvar(args.rounds)


if __name__ == "__main__":
    main()
