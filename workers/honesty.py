"""Honest estimates of how well the search's winner will do on new data.

Picking the best of many candidates on the same cross-validation folds makes the winner's CV
score optimistic (the "winner's curse"). ``bbc_cv`` removes that bias from the stored
out-of-fold (OOF) predictions alone, and ``corrected_resampled_ttest`` compares two candidates
over repeated k-fold splits without the overconfidence of a plain paired t-test.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from scipy import stats
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from tuttiml.service.spec import Metric
from tuttiml.workers import metrics

#: Mixed into the caller's seed so re-evaluation folds never coincide with the search folds.
_FRESH_SEED_TAG = 0x7E57

#: Candidates sorted together on the vectorised ROC AUC path (bounds peak memory).
_AUC_CHUNK = 32

#: Counts per block of bootstrap samples on the ROC AUC path (256 Ki int32 = 1 MiB, cached).
_AUC_CACHE_CELLS = 1 << 18

ScoreFn = Callable[[np.ndarray, np.ndarray], float]


def bootstrap_counts(n: int, n_boot: int, seed: int) -> np.ndarray:
    """How often each row appears in each bootstrap sample.

    Args:
        n: Number of rows.
        n_boot: Number of bootstrap samples.
        seed: Seed of the ``numpy.random.Generator`` that draws the rows.

    Returns:
        An ``(n_boot, n)`` integer matrix; row ``b`` sums to ``n`` and its zeros are the
        out-of-bag rows of sample ``b``. ``bbc_cv`` uses exactly these draws.
    """
    rng = np.random.default_rng(seed)
    draws = rng.integers(0, n, size=(n_boot, n))
    offsets = (np.arange(n_boot) * n)[:, None]
    flat = np.bincount((draws + offsets).ravel(), minlength=n_boot * n)
    return flat.reshape(n_boot, n).astype(np.int32)


def _class_index(y: np.ndarray, classes: np.ndarray) -> np.ndarray:
    idx = np.searchsorted(classes, y)
    idx = np.clip(idx, 0, len(classes) - 1)
    if not np.array_equal(classes[idx], y):
        raise ValueError("y holds labels that are not in classes")
    return idx


def _mean_terms(metric: Metric, y: np.ndarray, preds: Sequence[np.ndarray], classes: Any) -> Any:
    """Per-row terms whose weighted sums rank candidates on a bootstrap sample (greater=better).

    Returns a tuple ``(kind, payload)`` interpreted by ``_inbag_scores``.
    """
    m = len(preds)
    n = len(y)
    if metric in (Metric.RMSE, Metric.MAE, Metric.R2):
        resid = np.empty((n, m), dtype=np.float64)
        for j, p in enumerate(preds):
            resid[:, j] = np.asarray(p, dtype=float).ravel() - y
        # RMSE and R2 rank candidates exactly as the sum of squared errors does (the total sum
        # of squares of a sample does not depend on the candidate); MAE by absolute errors.
        terms = -np.abs(resid) if metric is Metric.MAE else -(resid**2)
        return "sum", terms
    yi = _class_index(y, classes)
    rows = np.arange(n)
    if metric is Metric.LOG_LOSS:
        terms = np.empty((n, m), dtype=np.float64)
        for j, p in enumerate(preds):
            terms[:, j] = np.log(metrics._clip_proba(p)[rows, yi])
        return "sum", terms
    labels = np.empty((n, m), dtype=np.int64)
    for j, p in enumerate(preds):
        labels[:, j] = np.argmax(np.asarray(p, dtype=float), axis=1)
    if metric is Metric.ACCURACY:
        return "sum", (labels == yi[:, None]).astype(np.float32)
    if metric is Metric.BALANCED_ACCURACY:
        return "balanced", (labels == yi[:, None]).astype(np.float32), yi, len(classes)
    if metric in (Metric.F1, Metric.F1_MACRO):
        ks = [1] if metric is Metric.F1 else list(range(len(classes)))
        return "f1", labels, yi, ks
    if metric is Metric.ROC_AUC:
        scores = np.empty((n, m), dtype=np.float64)
        for j, p in enumerate(preds):
            scores[:, j] = np.asarray(p, dtype=float)[:, 1]
        return "auc", scores, yi == 1
    raise ValueError(f"metric {metric!r} is not supported")


def _auc_inbag(scores: np.ndarray, positive: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """ROC AUC of every candidate on every bootstrap sample given by row ``counts``.

    Weighted Mann-Whitney statistic with midranks (ties count one half): over positive rows,
    ``sum_i w_i G_i - W_pos^2 / 2`` where ``G_i`` is the weight of rows scored below row ``i``
    plus half the weight of rows tied with it (``w`` = bootstrap counts). Each candidate needs
    one sort and, for all samples at once, one integer cumulative sum over its sorted rows:
    O(B·n·m) memory-bound work. Rows-first layout and int32 counts keep every gather a copy of
    contiguous vectors and the cumulative sum exact and fast.
    """
    n, m = scores.shape
    n_boot = counts.shape[0]
    total = counts.sum(axis=1, dtype=np.float64)
    # the statistic before halving is at most 2 * total^2: int32 only while that cannot overflow
    acc = np.int64 if 2 * float(total.max(initial=0.0)) ** 2 >= 2**31 else np.int32
    wt = np.ascontiguousarray(counts.T.astype(acc))  # (n, B)
    pos_rows = np.flatnonzero(positive)
    total_pos = wt[pos_rows].sum(axis=0, dtype=np.float64)
    total_neg = total - total_pos
    # samples are processed in blocks whose (n, block) working set stays in the CPU cache
    step = int(min(n_boot, max(8, _AUC_CACHE_CELLS // max(n, 1))))
    blocks = [
        (
            b,
            np.ascontiguousarray(wt[:, b : b + step]),
            np.zeros((n + 1, min(step, n_boot - b)), acc),
        )
        for b in range(0, n_boot, step)
    ]
    out = np.empty((n_boot, m), dtype=np.float64)
    rows = np.arange(n)
    for a in range(0, m, _AUC_CHUNK):
        chunk = scores[:, a : a + _AUC_CHUNK]
        order = np.argsort(chunk, axis=0, kind="stable")
        sorted_chunk = np.take_along_axis(chunk, order, axis=0)
        rank_of = np.empty_like(order)
        np.put_along_axis(rank_of, order, rows[:, None], axis=0)
        plan = []
        for c in range(chunk.shape[1]):
            s = sorted_chunk[:, c]
            new_group = np.empty(n, dtype=bool)
            new_group[0] = True
            np.not_equal(s[1:], s[:-1], out=new_group[1:])
            starts = np.flatnonzero(new_group)
            ends = np.append(starts[1:], n)
            group = (np.cumsum(new_group) - 1)[rank_of[pos_rows, c]]
            # padded[starts] = weight strictly below the group, padded[ends] = up to its end
            plan.append((order[:, c], starts[group], ends[group]))
        for b, w_blk, padded in blocks:
            w_pos = w_blk[pos_rows]
            for c, (ord_c, lo, hi) in enumerate(plan):
                np.cumsum(np.take(w_blk, ord_c, axis=0), axis=0, out=padded[1:])
                g = np.take(padded, lo, axis=0) + np.take(padded, hi, axis=0)
                out[b : b + step, a + c] = np.einsum("pb,pb->b", w_pos, g)
    num = 0.5 * out - 0.5 * (total_pos**2)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        return num / (total_pos * total_neg)[:, None]


def _inbag_scores(spec: Any, counts: np.ndarray) -> np.ndarray:
    """Scores (or order-preserving surrogates) of every candidate on every bootstrap sample."""
    kind = spec[0]
    w = counts.astype(np.float32 if spec[1].dtype == np.float32 else np.float64)
    if kind == "sum":
        return w @ spec[1]
    if kind == "balanced":
        _, correct, yi, k = spec
        per_class = np.stack([counts[:, yi == c].sum(axis=1) for c in range(k)], axis=1)
        present = (per_class > 0).sum(axis=1)
        with np.errstate(divide="ignore"):
            inv = np.where(per_class > 0, 1.0 / per_class, 0.0) / present[:, None]
        return (w * inv[:, yi].astype(w.dtype)) @ correct
    if kind == "f1":
        _, labels, yi, ks = spec
        w = counts.astype(np.float64)
        total = np.zeros((counts.shape[0], labels.shape[1]))
        for c in ks:
            pred_c = (labels == c).astype(np.float64)
            tp = w @ (pred_c * (yi == c)[:, None])
            denom = w @ pred_c + counts[:, yi == c].sum(axis=1)[:, None]
            with np.errstate(divide="ignore", invalid="ignore"):
                total += np.where(denom > 0, 2.0 * tp / denom, 0.0)
        return total / len(ks)
    if kind == "auc":
        _, scores, positive = spec
        return _auc_inbag(scores, positive, counts)
    raise AssertionError(kind)


def scores_on_rows(
    metric: Metric | str, y: np.ndarray, preds: Sequence[np.ndarray], classes: Any = None
) -> np.ndarray:
    """Scores of many candidates on the same rows in one vectorised pass (greater is better).

    Order-preserving for a fixed set of rows, not the metric's own value: sums instead of
    means (accuracy, log loss, MAE), minus the sum of squared errors for RMSE and R2; ROC AUC,
    balanced accuracy and F1 are exact. Used where candidates are ranked many times on one row
    set (greedy ensemble selection), where calling a scikit-learn metric per candidate costs
    about a millisecond each.
    """
    y, _, resolved, classes = _resolve(np.asarray(y), str(Metric(metric).value), classes)
    spec = _mean_terms(Metric(resolved), y, preds, classes)
    return _inbag_scores(spec, np.ones((1, len(y)), dtype=np.int32))[0]


def _resolve(
    y: np.ndarray, score_fn: ScoreFn | Metric | str, classes: np.ndarray | None
) -> tuple[np.ndarray, ScoreFn, Metric | None, np.ndarray | None]:
    """Normalise the target and scorer: a metric name gets the fast path and exact scorer."""
    if not isinstance(score_fn, str):
        return y, score_fn, None, classes
    metric = Metric(score_fn)
    if metric in (Metric.RMSE, Metric.MAE, Metric.R2):
        y, classes = y.astype(float), None
    else:
        classes = np.unique(y) if classes is None else np.asarray(classes)
    return y, metrics.scorer(metric, classes), metric, classes


def inbag_winners(
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    score_fn: ScoreFn | Metric | str,
    counts: np.ndarray,
    *,
    classes: np.ndarray | None = None,
) -> np.ndarray:
    """Index of the best candidate on each weighted sample of rows.

    Args:
        preds: Predictions of each candidate on the rows of ``y``.
        y: True targets.
        score_fn: A ``Metric`` (or its name) for the vectorised path, or ``f(y_true, pred)``.
        counts: ``(B, n)`` row multiplicities, one sample per row (see ``bootstrap_counts``);
            a row of ones selects on the plain CV score.
        classes: Sorted class labels of the probability columns (metric names only).

    Returns:
        ``(B,)`` candidate indices; ties go to the candidate listed first, and a sample where
        no candidate can be scored (e.g. one class for ROC AUC) yields 0.

    Raises:
        ValueError: an unknown metric name, or labels of ``y`` missing from ``classes``.
    """
    y = np.asarray(y)
    y, fn, metric, classes = _resolve(y, score_fn, classes)
    preds = [np.asarray(p) for p in preds]
    counts = np.asarray(counts)
    if metric is not None:
        inbag = _inbag_scores(_mean_terms(metric, y, preds, classes), counts)
    else:
        inbag = np.empty((counts.shape[0], len(preds)))
        rows = np.arange(len(y))
        for b in range(counts.shape[0]):
            idx = np.repeat(rows, counts[b])
            for j, p in enumerate(preds):
                try:
                    inbag[b, j] = fn(y[idx], p[idx])
                except ValueError:
                    inbag[b, j] = np.nan
    inbag = np.where(np.isnan(inbag), -np.inf, inbag)
    return np.argmax(inbag, axis=1)


def bbc_cv(
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    score_fn: ScoreFn | Metric | str,
    *,
    classes: np.ndarray | None = None,
    n_boot: int = 500,
    seed: int = 0,
    alpha: float = 0.05,
) -> dict[str, Any]:
    """Bootstrap Bias Corrected CV estimate of the selected candidate's performance.

    Tsamardinos, Greasidou & Borboudakis (Machine Learning 107, 2018): for each bootstrap sample
    of the OOF rows, the candidate with the best score on the in-bag rows is chosen and scored on
    the out-of-bag rows; the estimate is the mean of those out-of-bag scores and the interval is
    their percentile interval. Selection thus never sees the rows it is judged on, which removes
    the optimism of reporting the best of many CV scores, without refitting anything.

    Speed: when ``score_fn`` is a metric name, in-bag scores of all candidates on all samples are
    computed at once (``inbag_winners``). Metrics that are sums of per-row terms (accuracy, log
    loss, MAE; RMSE and R2 through the sum of squared errors, which ranks candidates
    identically; balanced accuracy and F1 through count-weighted sums) become one matrix product
    ``counts @ terms``. ROC AUC is computed exactly on every full bootstrap sample with a
    weighted rank statistic (one sort per candidate, one integer cumulative sum per candidate
    covering all samples) rather than on subsampled bootstraps, so the result does not depend on
    a subsampling choice; 2,000 candidates × 1,000 rows × 500 samples take a few seconds.
    Out-of-bag scores of the winners, and the plain CV score, always come from
    ``workers.metrics.score`` (exact scikit-learn semantics). A plain callable is honoured too,
    but then every candidate is scored on every sample by calling it: ``n_boot * len(preds)``
    calls, fine only for few candidates.

    Args:
        preds: OOF predictions of each candidate on the same rows, in the layout of
            ``workers.metrics`` ((n, k) probabilities or an (n,) vector).
        y: True targets of the rows.
        score_fn: A ``Metric`` (or its name) for the fast path, or ``f(y_true, pred)``
            returning a greater-is-better score.
        classes: Sorted class labels matching the probability columns (classification with a
            metric name; defaults to the sorted unique labels of ``y``).
        n_boot: Number of bootstrap samples.
        seed: Seed of the bootstrap draws (see ``bootstrap_counts``).
        alpha: One minus the confidence level of the percentile interval.

    Returns:
        ``{estimate, ci_low, ci_high, n_boot, n_candidates, winner_cv, optimism}`` as plain
        floats and ints, greater-is-better; ``n_boot`` counts the samples actually used (a
        sample is skipped when its out-of-bag rows are empty or cannot be scored, e.g. a single
        class for ROC AUC), and ``optimism = winner_cv - estimate``.

    Raises:
        ValueError: no candidates, fewer than two rows, predictions whose length differs from
            ``y``, ``n_boot < 1``, ``alpha`` outside (0, 1), an unsupported metric name, or no
            usable bootstrap sample.
    """
    y = np.asarray(y)
    n = len(y)
    preds = [np.asarray(p) for p in preds]
    if not preds:
        raise ValueError("bbc_cv needs at least one candidate")
    if any(p.shape[0] != n for p in preds):
        raise ValueError("every candidate must predict every row of y")
    if n < 2:
        raise ValueError("bbc_cv needs at least two rows")
    if n_boot < 1:
        raise ValueError("n_boot must be at least 1")
    if not 0.0 < alpha < 1.0:
        raise ValueError("alpha must lie in (0, 1)")
    y, fn, metric, classes = _resolve(y, score_fn, classes)
    counts = bootstrap_counts(n, n_boot, seed)
    everything = np.vstack([np.ones((1, n), dtype=counts.dtype), counts])
    winners = inbag_winners(preds, y, metric or fn, everything, classes=classes)
    oob_scores = []
    for b in range(n_boot):
        oob = counts[b] == 0
        if not oob.any():
            continue
        try:
            value = float(fn(y[oob], preds[winners[b + 1]][oob]))
        except ValueError:  # e.g. ROC AUC with one class out of bag
            continue
        if math.isfinite(value):
            oob_scores.append(value)
    if not oob_scores:
        raise ValueError("no bootstrap sample had scorable out-of-bag rows")
    oob_arr = np.asarray(oob_scores)
    winner_cv = float(fn(y, preds[winners[0]]))
    estimate = float(oob_arr.mean())
    lo, hi = np.quantile(oob_arr, [alpha / 2.0, 1.0 - alpha / 2.0])
    return {
        "estimate": estimate,
        "ci_low": float(lo),
        "ci_high": float(hi),
        "n_boot": len(oob_scores),
        "n_candidates": len(preds),
        "winner_cv": winner_cv,
        "optimism": winner_cv - estimate,
    }


#: Rows and bootstrap samples of :func:`selection_estimate`. It runs once per finalize: the
#: same figure ranks trials against library ensembles and is the report's honest estimate.
SELECTION_MAX_ROWS = 20_000
SELECTION_BOOT = 200


def selection_estimate(
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    metric: Metric | str,
    *,
    classes: np.ndarray | None = None,
    seed: int = 0,
) -> dict[str, Any]:
    """BBC-CV of picking the best of ``preds``, computed once per finalize and stored.

    :func:`bbc_cv` on at most ``SELECTION_MAX_ROWS`` rows drawn with ``seed`` and
    ``SELECTION_BOOT`` bootstrap samples. Its ``optimism`` (floored at 0 in
    :func:`selection_optimism`) is what finalize subtracts from the trials' CV scores before
    they compete with library ensembles, whose scores are nested; its ``estimate`` and interval
    are the report's honest estimate of the winner. Greater-is-better units, plus ``rows`` (how
    many rows were used). Empty when there is no candidate or no usable bootstrap sample.
    """
    if len(preds) < 1:
        return {}
    y = np.asarray(y)
    keep = np.arange(len(y))
    if len(y) > SELECTION_MAX_ROWS:
        keep = np.sort(
            np.random.default_rng(seed).choice(len(y), SELECTION_MAX_ROWS, replace=False)
        )
    try:
        out = bbc_cv(
            [np.asarray(p)[keep] for p in preds],
            y[keep],
            metric,
            classes=classes,
            n_boot=SELECTION_BOOT,
            seed=seed,
        )
    except ValueError:
        return {}
    return {**out, "rows": len(keep)}


def selection_optimism(
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    metric: Metric | str,
    *,
    classes: np.ndarray | None = None,
    seed: int = 0,
) -> float:
    """How far the best CV score among ``preds`` overstates what picking the best delivers.

    The optimism of :func:`selection_estimate`, floored at 0; 0 for fewer than two candidates
    (nothing was picked). Greater-is-better units.
    """
    if len(preds) < 2:
        return 0.0
    return max(
        float(
            selection_estimate(preds, y, metric, classes=classes, seed=seed).get("optimism", 0.0)
        ),
        0.0,
    )


def corrected_resampled_ttest(
    scores_a: Sequence[float], scores_b: Sequence[float], *, n_train: int, n_test: int
) -> dict[str, float]:
    """Corrected repeated k-fold t-test of two models scored on the same splits.

    Nadeau & Bengio (Machine Learning 52, 2003), in the repeated k-fold form of Bouckaert &
    Frank (PAKDD 2004). Training sets of different splits overlap, so the per-split differences
    are correlated and the plain paired t-test's variance ``sigma^2 / (r k)`` is too small; the
    correction inflates it to ``(1 / (r k) + n_test / n_train) * sigma^2``.

    Args:
        scores_a: Score of model A on each of the r×k splits.
        scores_b: Score of model B on the same splits, in the same order.
        n_train: Rows used for training in one split.
        n_test: Rows used for testing in one split.

    Returns:
        ``{mean_diff, t, p_value, df}`` with ``mean_diff`` the mean of ``a - b`` and a two-sided
        p-value from Student's t with ``r k - 1`` degrees of freedom. When all differences are
        equal the variance is zero: identical scores give ``t = 0, p = 1``; a constant nonzero
        difference gives ``t = ±inf, p = 0``.

    Raises:
        ValueError: lengths differ, fewer than two splits, or non-positive set sizes.
    """
    a = np.asarray(scores_a, dtype=float).ravel()
    b = np.asarray(scores_b, dtype=float).ravel()
    if a.shape != b.shape:
        raise ValueError("scores_a and scores_b must have the same length")
    if a.size < 2:
        raise ValueError("the corrected t-test needs at least two splits")
    if n_train <= 0 or n_test <= 0:
        raise ValueError("n_train and n_test must be positive")
    d = a - b
    j = d.size
    mean = float(d.mean())
    df = float(j - 1)
    spread = float(np.max(np.abs(d - d[0])))
    if spread <= 1e-12 * max(1.0, float(np.max(np.abs(d)))):
        if mean == 0.0:
            return {"mean_diff": 0.0, "t": 0.0, "p_value": 1.0, "df": df}
        return {"mean_diff": mean, "t": math.copysign(math.inf, mean), "p_value": 0.0, "df": df}
    var = float(d.var(ddof=1))
    t = mean / math.sqrt((1.0 / j + n_test / n_train) * var)
    p = float(2.0 * stats.t.sf(abs(t), df))
    return {"mean_diff": mean, "t": float(t), "p_value": min(p, 1.0), "df": df}


def _fresh_seed(seed: int) -> int:
    return int(np.random.SeedSequence([seed, _FRESH_SEED_TAG]).generate_state(1)[0])


def repeated_kfold_indices(
    n: int, y: np.ndarray | None, task: str, *, repeats: int, folds: int, seed: int
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Train/test index pairs of a repeated (stratified) k-fold for re-evaluating candidates.

    The splitter's seed is derived from ``seed`` mixed with a fixed tag, so passing the search's
    own seed still gives folds that differ from the search folds (re-using those folds would
    test the winner on the splits it was selected on).

    Args:
        n: Number of rows.
        y: Targets (needed for stratification; ignored for regression).
        task: ``"binary"``, ``"multiclass"`` or ``"regression"``.
        repeats: Number of repetitions r.
        folds: Number of folds k.
        seed: Base seed.

    Returns:
        ``repeats * folds`` pairs ``(train_idx, test_idx)``, repetition by repetition.

    Raises:
        ValueError: from scikit-learn for impossible splits (e.g. more folds than members of
            a class), or when classification has no ``y``.
    """
    rs = _fresh_seed(seed)
    dummy = np.zeros((n, 1))
    if task == "regression":
        splitter: Any = RepeatedKFold(n_splits=folds, n_repeats=repeats, random_state=rs)
        return [(tr, te) for tr, te in splitter.split(dummy)]
    if y is None:
        raise ValueError("stratified folds need y")
    splitter = RepeatedStratifiedKFold(n_splits=folds, n_repeats=repeats, random_state=rs)
    return [(tr, te) for tr, te in splitter.split(dummy, np.asarray(y))]
