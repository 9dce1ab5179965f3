"""Bias/variance decomposition of a model's loss over bootstrap replicates of its training rows.

Shows *why* an ensemble helps: bagging mostly lowers variance, boosting mostly lowers bias.
The definitions are exactly those of mlxtend's ``bias_variance_decomp`` so numbers can be checked
against it: squared error (mse) and Domingos' 0-1 loss decomposition (ICML 2000).
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np
from sklearn.base import clone
from sklearn.model_selection import train_test_split

Loss = Literal["0-1_loss", "mse"]


def _take(data: Any, idx: np.ndarray) -> Any:
    return data.iloc[idx] if hasattr(data, "iloc") else np.asarray(data)[idx]


def _draws(n: int, rounds: int, seed: int, rng_compat: str) -> list[np.ndarray]:
    if rng_compat == "mlxtend":
        # mlxtend's _draw_bootstrap_sample: RandomState(seed).choice(arange(n), n, replace=True)
        legacy = np.random.RandomState(seed)
        rows = np.arange(n)
        return [legacy.choice(rows, size=n, replace=True) for _ in range(rounds)]
    if rng_compat == "generator":
        gen = np.random.default_rng(seed)
        return [gen.integers(0, n, size=n) for _ in range(rounds)]
    raise ValueError(f"rng_compat must be 'mlxtend' or 'generator', not {rng_compat!r}")


def bias_variance(
    estimator: Any,
    X_train: Any,
    y_train: Any,
    X_test: Any,
    y_test: Any,
    *,
    loss: Loss = "0-1_loss",
    rounds: int = 50,
    seed: int = 0,
    rng_compat: Literal["mlxtend", "generator"] = "mlxtend",
) -> dict[str, float]:
    """Average expected loss, bias and variance of ``estimator`` on fixed test rows.

    Each round fits a fresh ``clone`` of the estimator on a bootstrap replicate of the training
    rows (as many draws as rows, with replacement) and predicts the test rows.

    - ``mse``: main prediction = mean over rounds; bias = mean((main - y)^2) (the squared bias,
      as mlxtend reports it); variance = mean over rows and rounds of (pred - main)^2;
      expected loss = mean (pred - y)^2 = bias + variance.
    - ``0-1_loss`` (Domingos 2000): main prediction = most frequent label over rounds (ties go
      to the smallest label, like mlxtend's ``argmax(bincount)``); bias = share of rows whose
      main prediction is wrong; variance = share of (round, row) predictions that differ from
      the main prediction; expected loss = share of wrong predictions.

    Unlike mlxtend, labels need not be non-negative integers, and pandas inputs keep their
    column names (rows are picked with ``iloc``). mlxtend refits one estimator object while this
    clones it per round; the two agree whenever ``random_state`` is fixed or unused.

    Args:
        estimator: Unfitted scikit-learn style estimator (cloned, never fitted itself).
        X_train: Training features the replicates are drawn from (array or DataFrame).
        y_train: Training targets.
        X_test: Features of the fixed evaluation rows (see ``holdout_split``).
        y_test: Targets of the evaluation rows.
        loss: ``"0-1_loss"`` for classifiers, ``"mse"`` for regressors.
        rounds: Number of bootstrap replicates.
        seed: Seed of the replicate draws.
        rng_compat: ``"mlxtend"`` draws with ``np.random.RandomState(seed).choice`` exactly as
            mlxtend does (same seed, same replicates, same numbers); ``"generator"`` uses
            ``np.random.default_rng(seed)``.

    Returns:
        ``{"expected_loss", "bias", "variance"}`` as plain floats.

    Raises:
        ValueError: unknown ``loss`` or ``rng_compat``, ``rounds < 1``, or mismatched lengths.
    """
    if loss not in ("0-1_loss", "mse"):
        raise ValueError(f"loss must be '0-1_loss' or 'mse', not {loss!r}")
    if rounds < 1:
        raise ValueError("rounds must be at least 1")
    n = len(y_train)
    if len(X_train) != n or len(X_test) != len(y_test):
        raise ValueError("features and targets must have the same number of rows")
    y_true = np.asarray(y_test)
    preds = []
    for idx in _draws(n, rounds, seed, rng_compat):
        model = clone(estimator).fit(_take(X_train, idx), _take(y_train, idx))
        preds.append(np.asarray(model.predict(X_test)).ravel())
    all_pred = np.stack(preds)  # (rounds, n_test)

    if loss == "mse":
        all_pred = all_pred.astype(float)
        y_float = y_true.astype(float)
        main = all_pred.mean(axis=0)
        return {
            "expected_loss": float(np.mean((all_pred - y_float) ** 2)),
            "bias": float(np.mean((main - y_float) ** 2)),
            "variance": float(np.mean((all_pred - main) ** 2)),
        }
    labels, codes = np.unique(np.concatenate([all_pred.ravel(), y_true]), return_inverse=True)
    pred_codes = codes[: all_pred.size].reshape(all_pred.shape)
    true_codes = codes[all_pred.size :]
    votes = np.zeros((len(labels), all_pred.shape[1]), dtype=np.int64)
    np.add.at(votes, (pred_codes, np.arange(all_pred.shape[1])[None, :]), 1)
    main_codes = np.argmax(votes, axis=0)
    return {
        "expected_loss": float(np.mean(pred_codes != true_codes)),
        "bias": float(np.mean(main_codes != true_codes)),
        "variance": float(np.mean(pred_codes != main_codes)),
    }


def holdout_split(
    n: int, y: Any, task: str, *, fraction: float = 0.25, seed: int
) -> tuple[np.ndarray, np.ndarray]:
    """Split rows into a replicate pool and a fixed evaluation slice.

    Replicates for ``bias_variance`` are drawn from the first part only, so the evaluation rows
    never appear in any replicate. Classification splits are stratified when every class has at
    least two rows.

    Args:
        n: Number of rows.
        y: Targets (used for stratification; may be None for regression).
        task: ``"binary"``, ``"multiclass"`` or ``"regression"``.
        fraction: Share of rows held out for evaluation.
        seed: Seed of the split.

    Returns:
        ``(train_idx, test_idx)``, sorted, disjoint, covering ``range(n)``.

    Raises:
        ValueError: ``fraction`` outside (0, 1) or too few rows for both parts.
    """
    if not 0.0 < fraction < 1.0:
        raise ValueError("fraction must lie in (0, 1)")
    stratify = None
    if task != "regression" and y is not None:
        _, class_counts = np.unique(np.asarray(y), return_counts=True)
        if class_counts.min() >= 2:
            stratify = np.asarray(y)
    try:
        train, test = train_test_split(
            np.arange(n), test_size=fraction, random_state=seed, stratify=stratify
        )
    except ValueError:
        if stratify is None:
            raise
        # too few rows per class for the requested test size: fall back to a plain split
        train, test = train_test_split(np.arange(n), test_size=fraction, random_state=seed)
    return np.sort(train), np.sort(test)
