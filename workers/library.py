"""Library ensembles: combine stored out-of-fold predictions, with no new fits on the features.

Every candidate (trial) stores its out-of-fold (OOF) predictions on the same fixed folds, so
the members' predictions line up row by row (layout: see :mod:`workers.metrics`; an ``(n, k)``
probability matrix in sorted class order for classification, a vector for regression). From
those stored predictions this module builds two kinds of ensemble:

``selection``
    Greedy forward ensemble selection with replacement (Caruana, Niculescu-Mizil, Crew and
    Ksikes, "Ensemble Selection from Libraries of Models", ICML 2004). The result is a weight
    vector: the ensemble predicts the weighted average of its members' predictions.

``meta``
    A stacked meta-model fitted on the members' OOF predictions (Wolpert 1992, "Stacked
    Generalization"). Classification: a multinomial, L2-regularised
    :class:`~sklearn.linear_model.LogisticRegression` on the concatenated member probabilities
    (for binary tasks only each member's positive-class column is used, the other one is
    redundant). Regression: a non-negative linear combination without intercept, fitted by
    non-negative least squares (Breiman 1996, "Stacked Regressions"), kept as a fitted
    ``LinearRegression(positive=True, fit_intercept=False)`` so it pickles/skops-persists like
    any other scikit-learn estimator; its ``coef_`` are the member weights (not forced to sum
    to one).

Both are chosen on the very rows they would be scored on, so their score on those rows is
optimistic (selection over hundreds of members can look good on pure noise).
:func:`honest_score` therefore nests them: for each outer fold the weights / meta-model are
fitted on the other folds' rows and only the held rows are scored. The in-sample score is kept
separately (``in_sample_score``) for reporting only.

At finalize time the members are refitted on all rows; their new predictions are combined with
the weights / meta-model fitted on all OOF rows (:func:`weighted_average`,
:func:`meta_predict`), so nothing here is refitted on the original features.

Limitation, stated so nobody over-reads the honest score: it is honest about the ensembling
step given the stored OOF predictions. The choice of which trials enter the library (top
trials by OOF score) and the members' hyperparameter search happened on all rows upstream.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sklearn.linear_model import LinearRegression, LogisticRegression
from tuttiml.service.spec import Metric
from tuttiml.workers import metrics
from tuttiml.workers.honesty import scores_on_rows

REGRESSION = "regression"
METHODS: tuple[str, ...] = ("selection", "meta")
#: Prediction cells (rows × columns × members) scored per vectorised pass of greedy selection.
BATCH_CELLS = 4_000_000

#: Inverse L2 strength of the classification meta-model (scikit-learn's default, C=1).
META_C = 1.0
#: Iteration cap of the meta-model's lbfgs solver (default 100 is often short on stacked probas).
META_MAX_ITER = 1000
#: Solver tolerance of the meta-model, tighter than the default 1e-4: the fit is tiny (members x
#: classes columns) and a converged optimum keeps the meta-model reproducible across versions.
META_TOL = 1e-6

ScoreFn = Callable[[np.ndarray, np.ndarray], float]
BatchScoreFn = Callable[[np.ndarray, list[np.ndarray]], np.ndarray]


# --------------------------------------------------------------------------- helpers


def _task_name(task: str) -> str:
    """``binary`` / ``multiclass`` / ``regression`` from a string or a ``service.spec.Task``."""
    return str(getattr(task, "value", task))


def _is_regression(task: str) -> bool:
    return _task_name(task) == REGRESSION


def _stack(preds: Sequence[np.ndarray]) -> np.ndarray:
    """Members stacked on a new first axis, as float; checks that they line up."""
    if len(preds) == 0:
        raise ValueError("the library is empty: at least one member is required")
    arrays = [np.asarray(p, dtype=float) for p in preds]
    shape = arrays[0].shape
    for i, a in enumerate(arrays):
        if a.shape != shape:
            raise ValueError(
                f"member {i} has predictions of shape {a.shape}, member 0 has {shape}; "
                "members must be OOF predictions on the same rows"
            )
    if len(shape) not in (1, 2):
        raise ValueError(f"predictions must be a vector or an (n, k) matrix, got shape {shape}")
    return np.stack(arrays)


def _safe_score(score_fn: ScoreFn, y: np.ndarray, pred: np.ndarray) -> float:
    """Score, with NaN mapped to -inf so that it never wins a comparison."""
    s = float(score_fn(y, pred))
    return -math.inf if math.isnan(s) else s


def weighted_average(preds: Sequence[np.ndarray], weights: np.ndarray) -> np.ndarray:
    """The ensemble prediction ``sum_j weights[j] * preds[j]`` in the stored layout.

    Used for the selection ensemble both on OOF rows and, at finalize, on the predictions of
    the refitted members (same member order as the weights).
    """
    stacked = _stack(preds)
    w = np.asarray(weights, dtype=float)
    if w.shape != (stacked.shape[0],):
        raise ValueError(f"{w.shape[0] if w.ndim else 0} weights for {stacked.shape[0]} members")
    return np.tensordot(w, stacked, axes=1)


# --------------------------------------------------------------------------- selection


def greedy_selection(
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    score_fn: ScoreFn,
    *,
    rounds: int = 50,
    batch: BatchScoreFn | None = None,
) -> np.ndarray:
    """Greedy forward ensemble selection with replacement (Caruana et al., ICML 2004).

    Starts from the best single member, then ``rounds - 1`` times adds (with replacement) the
    member whose addition gives the best score of the averaged prediction, so ``rounds`` is the
    total number of picks and the weights are multiples of ``1 / picks``. As in the paper, the
    returned ensemble is the best of the nested sequence of ensembles built this way, which
    guarantees a score at least that of the best single member on these rows.

    Ties (equal scores) go to the lowest member index, and an earlier, smaller ensemble is kept
    unless a later one is strictly better, so the result is deterministic.

    Args:
        preds: OOF predictions of each member, all of the same shape.
        y: true targets of the same rows.
        score_fn: ``f(y_true, pred) -> float``, greater is better (see ``metrics.scorer``).
        rounds: total number of picks (>= 1).
        batch: optional ``f(y_true, [pred, ...]) -> scores`` ranking many candidates at once
            in the same order as ``score_fn`` (``honesty.scores_on_rows``); each round then
            scores all members in one vectorised pass instead of one metric call each.

    Returns:
        Non-negative weights summing to 1, one per member.
    """
    if rounds < 1:
        raise ValueError(f"rounds must be >= 1, got {rounds}")
    stacked = _stack(preds)
    y = np.asarray(y)
    if y.shape[0] != stacked.shape[1]:
        raise ValueError(f"{y.shape[0]} targets for predictions of {stacked.shape[1]} rows")
    m = stacked.shape[0]
    cells = int(np.prod(stacked.shape[1:]))
    chunk = max(1, BATCH_CELLS // max(cells, 1))  # members mixed per vectorised pass

    counts = np.zeros(m, dtype=np.int64)
    running = np.zeros(stacked.shape[1:], dtype=float)
    best_counts = counts
    best_score = -math.inf
    for step in range(rounds):
        k = step + 1
        step_best, step_j = -math.inf, -1
        if batch is not None:
            for a in range(0, m, chunk):
                vals = np.asarray(batch(y, list((running + stacked[a : a + chunk]) / k)), float)
                vals = np.where(np.isnan(vals), -math.inf, vals)
                j = int(np.argmax(vals))  # first of equal scores: the lowest index
                if vals[j] > step_best:
                    step_best, step_j = float(vals[j]), a + j
        else:
            for j in range(m):
                s = _safe_score(score_fn, y, (running + stacked[j]) / k)
                if s > step_best:
                    step_best, step_j = s, j
        if step_j < 0:  # every candidate scored NaN / -inf: keep the lowest index
            step_j = 0
        counts = counts.copy()
        counts[step_j] += 1
        running = running + stacked[step_j]
        if step == 0 or step_best > best_score:
            best_score, best_counts = step_best, counts
    return best_counts / best_counts.sum()


# --------------------------------------------------------------------------- meta-model


@dataclass
class MetaModel:
    """A meta-model fitted on members' OOF predictions, usable on refitted members' predictions.

    Attributes:
        task: ``binary``, ``multiclass`` or ``regression``.
        model: fitted scikit-learn estimator: ``LogisticRegression`` (classification) or
            ``LinearRegression(positive=True, fit_intercept=False)`` (regression, NNLS).
        n_members: number of members, in the order of the prediction list.
        classes: the full class labels of the stored layout (``None`` for regression); the
            model may have seen only a subset of them in a fold, missing ones get probability 0.
    """

    task: str
    model: LogisticRegression | LinearRegression
    n_members: int
    classes: np.ndarray | None = None

    @property
    def weights(self) -> np.ndarray | None:
        """Regression: the non-negative member weights (NNLS coefficients); else ``None``."""
        if isinstance(self.model, LinearRegression):
            return np.asarray(self.model.coef_, dtype=float)
        return None


def meta_features(stacked: np.ndarray) -> np.ndarray:
    """Design matrix of the meta-model from members stacked as ``(m, n)`` or ``(m, n, k)``.

    Regression: one column per member. Classification: member probabilities concatenated
    member by member (member 0's classes first); for ``k == 2`` only the positive-class column
    of each member, since the other is ``1 - p``.
    """
    if stacked.ndim == 2:
        return stacked.T.copy()
    m, n, k = stacked.shape
    if k == 2:
        return stacked[:, :, 1].T.copy()
    return stacked.transpose(1, 0, 2).reshape(n, m * k)


def fit_meta(
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    task: str,
    *,
    classes: np.ndarray | None = None,
    C: float = META_C,
) -> MetaModel:
    """Fit the stacked meta-model on members' OOF predictions (see the module docstring).

    Args:
        preds: OOF predictions of each member (same rows, same layout).
        y: true targets of those rows.
        task: ``binary``, ``multiclass`` or ``regression``.
        classes: the sorted class labels of the layout; defaults to ``np.unique(y)``, pass it
            when some class may be absent from ``y`` (e.g. a training part of an outer fold).
        C: inverse L2 regularisation strength of the logistic meta-model.
    """
    stacked = _stack(preds)
    y = np.asarray(y)
    if y.shape[0] != stacked.shape[1]:
        raise ValueError(f"{y.shape[0]} targets for predictions of {stacked.shape[1]} rows")
    X = meta_features(stacked)
    if _is_regression(task):
        if stacked.ndim != 2:
            raise ValueError("regression predictions must be vectors")
        reg = LinearRegression(positive=True, fit_intercept=False).fit(X, y.astype(float))
        return MetaModel(task=_task_name(task), model=reg, n_members=stacked.shape[0])
    if stacked.ndim != 3:
        raise ValueError("classification predictions must be (n, k) probability matrices")
    cls = np.unique(y) if classes is None else np.asarray(classes)
    if cls.shape[0] != stacked.shape[2]:
        raise ValueError(
            f"{cls.shape[0]} classes but predictions have {stacked.shape[2]} columns; "
            "pass the full sorted `classes`"
        )
    if np.unique(y).shape[0] < 2:
        raise ValueError("the meta-model needs at least two classes among the training rows")
    clf = LogisticRegression(C=C, max_iter=META_MAX_ITER, tol=META_TOL).fit(X, y)
    return MetaModel(task=_task_name(task), model=clf, n_members=stacked.shape[0], classes=cls)


def meta_predict(meta: MetaModel, preds: Sequence[np.ndarray], task: str) -> np.ndarray:
    """Predictions of a fitted meta-model in the stored layout (probabilities / vector).

    ``preds`` are the members' predictions on any rows (OOF rows, held rows of an outer fold,
    or new rows from the refitted members), in the member order used by :func:`fit_meta`.
    """
    if _is_regression(task) != _is_regression(meta.task):
        raise ValueError(f"meta-model was fitted for {meta.task!r}, not {task!r}")
    stacked = _stack(preds)
    if stacked.shape[0] != meta.n_members:
        raise ValueError(f"meta-model has {meta.n_members} members, got {stacked.shape[0]}")
    X = meta_features(stacked)
    if isinstance(meta.model, LinearRegression):
        return np.asarray(meta.model.predict(X), dtype=float).ravel()
    assert meta.classes is not None
    proba = np.asarray(meta.model.predict_proba(X), dtype=float)
    fitted = np.asarray(meta.model.classes_)
    if np.array_equal(fitted, meta.classes):
        return proba
    out = np.zeros((proba.shape[0], meta.classes.shape[0]))
    out[:, np.searchsorted(meta.classes, fitted)] = proba
    return out


# --------------------------------------------------------------------------- honest scoring


@dataclass
class HonestResult:
    """Nested (honest) evaluation of one library-ensemble method.

    Attributes:
        method: ``selection`` or ``meta``.
        fold_ids: outer fold ids, in the order of ``fold_scores``.
        fold_scores: per outer fold, the score on the held rows of an ensemble chosen / fitted
            on the other folds' rows only (greater is better).
        mean: mean of ``fold_scores``; the number to compare with single trials' CV scores.
        std: sample standard deviation (ddof=1) of ``fold_scores`` (0 with one fold).
        nested_oof: nested OOF predictions of the ensemble, layout as stored; every row was
            predicted by weights / a meta-model that never saw it.
        in_sample_score: score of the final ensemble on the rows it was fitted on (optimistic;
            for reporting only, never for ranking).
        weights: final weights fitted on all rows (selection; NNLS weights for regression
            meta), ``None`` for the classification meta-model.
        meta: final meta-model fitted on all rows (``meta`` method), else ``None``.
    """

    method: str
    fold_ids: list[int]
    fold_scores: list[float]
    mean: float
    std: float
    nested_oof: np.ndarray
    in_sample_score: float
    weights: np.ndarray | None = None
    meta: MetaModel | None = None


def _fit_predict(
    method: str,
    train: list[np.ndarray],
    y_train: np.ndarray,
    apply: list[np.ndarray],
    score_fn: ScoreFn,
    task: str,
    rounds: int,
    classes: np.ndarray | None,
    batch: BatchScoreFn | None = None,
) -> tuple[np.ndarray, np.ndarray | None, MetaModel | None]:
    """Fit ``method`` on ``train`` rows, predict the ``apply`` rows; (pred, weights, meta)."""
    if method == "selection":
        w = greedy_selection(train, y_train, score_fn, rounds=rounds, batch=batch)
        return weighted_average(apply, w), w, None
    meta = fit_meta(train, y_train, task, classes=classes)
    return meta_predict(meta, apply, task), meta.weights, meta


def honest_score(
    method: str,
    preds: Sequence[np.ndarray],
    y: np.ndarray,
    outer_folds: np.ndarray,
    score_fn: ScoreFn,
    *,
    task: str,
    rounds: int = 50,
    classes: np.ndarray | None = None,
    batch: BatchScoreFn | None = None,
) -> HonestResult:
    """Nested evaluation of a library-ensemble method; held rows never enter the fit.

    For each outer fold, the weights (``selection``) or the meta-model (``meta``) are fitted on
    the members' OOF predictions of the other folds' rows and the held rows are predicted and
    scored. The final weights / meta-model are then fitted on all rows; their score on those
    same rows is returned as ``in_sample_score``, apart from the honest numbers.

    Args:
        method: ``selection`` or ``meta``.
        preds: OOF predictions of each member (stored layout, same rows).
        y: true targets.
        outer_folds: int fold id per row (typically the same folds the OOF predictions used).
        score_fn: ``f(y_true, pred) -> float``, greater is better.
        task: ``binary``, ``multiclass`` or ``regression``.
        rounds: picks of greedy selection (ignored by ``meta``).
        classes: sorted class labels of the layout (classification ``meta``; defaults to
            ``np.unique(y)``).
        batch: vectorised ranking of many candidates for greedy selection (see
            :func:`greedy_selection`).
    """
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; choose from {', '.join(METHODS)}")
    stacked = _stack(preds)
    y = np.asarray(y)
    folds = np.asarray(outer_folds)
    n = stacked.shape[1]
    if y.shape[0] != n or folds.shape != (n,):
        raise ValueError(f"y ({y.shape[0]}) and outer_folds ({folds.shape}) must have {n} rows")
    if not _is_regression(task) and classes is None:
        classes = np.unique(y)
    fold_ids = [int(f) for f in np.unique(folds)]
    if len(fold_ids) < 2:
        raise ValueError("honest scoring needs at least two outer folds")

    members = list(stacked)
    nested = np.zeros(stacked.shape[1:], dtype=float)
    scores: list[float] = []
    for f in fold_ids:
        held = folds == f
        train = ~held
        pred, _, _ = _fit_predict(
            method,
            [p[train] for p in members],
            y[train],
            [p[held] for p in members],
            score_fn,
            task,
            rounds,
            classes,
            batch,
        )
        nested[held] = pred
        scores.append(float(score_fn(y[held], pred)))

    full_pred, weights, meta = _fit_predict(
        method, members, y, members, score_fn, task, rounds, classes, batch
    )
    arr = np.asarray(scores, dtype=float)
    return HonestResult(
        method=method,
        fold_ids=fold_ids,
        fold_scores=scores,
        mean=float(arr.mean()),
        std=float(arr.std(ddof=1)) if arr.size > 1 else 0.0,
        nested_oof=nested,
        in_sample_score=float(score_fn(y, full_pred)),
        weights=weights,
        meta=meta,
    )


# --------------------------------------------------------------------------- convenience


@dataclass
class LibraryEnsemble:
    """One library ensemble as reported (plain numbers; ``to_json`` drops the fitted model).

    Attributes:
        method: ``selection`` or ``meta``.
        member_trial_ids: trials the finalize step must refit, in the order of ``weights`` and
            of the meta-model's inputs. For ``selection`` only members with non-zero weight.
        weights: selection weights (sum to 1), or the NNLS weights of the regression
            meta-model; ``None`` for the classification meta-model.
        meta_coef / meta_intercept: the classification meta-model's coefficients (rows: one per
            class, or one for binary; columns: :func:`meta_features` layout) and intercepts.
        metric: metric name; scores below are greater-is-better (losses negated), the
            ``*_natural`` values are in the metric's own sign for display.
        honest_mean / honest_std / fold_scores: nested evaluation (see :class:`HonestResult`).
        in_sample_score: optimistic score on the rows the ensemble was fitted on.
        rounds: picks of greedy selection (``None`` for meta).
        fitted: the fitted :class:`MetaModel` (``meta``), for the finalize step; not JSON.
    """

    method: str
    member_trial_ids: list[int]
    weights: list[float] | None
    metric: str
    honest_mean: float
    honest_std: float
    fold_scores: list[float]
    in_sample_score: float
    honest_mean_natural: float
    in_sample_score_natural: float
    rounds: int | None = None
    meta_coef: list[list[float]] | None = None
    meta_intercept: list[float] | None = None
    fitted: MetaModel | None = field(default=None, repr=False, compare=False)

    def to_json(self) -> dict[str, Any]:
        """Plain ``dict`` of JSON-native values (no numpy types, no fitted model)."""
        return {
            "method": self.method,
            "member_trial_ids": [int(t) for t in self.member_trial_ids],
            "weights": None if self.weights is None else [float(w) for w in self.weights],
            "metric": self.metric,
            "honest_mean": float(self.honest_mean),
            "honest_std": float(self.honest_std),
            "fold_scores": [float(s) for s in self.fold_scores],
            "in_sample_score": float(self.in_sample_score),
            "honest_mean_natural": float(self.honest_mean_natural),
            "in_sample_score_natural": float(self.in_sample_score_natural),
            "rounds": self.rounds,
            "meta_coef": self.meta_coef,
            "meta_intercept": self.meta_intercept,
        }


def build_library_ensembles(
    members: dict[int, np.ndarray],
    y: np.ndarray,
    folds: np.ndarray,
    metric: Metric | str,
    task: str,
    classes: np.ndarray | None,
    *,
    rounds: int = 50,
) -> list[LibraryEnsemble]:
    """Run both methods (selection, then meta) on the library and report them JSON-friendly.

    Args:
        members: trial id -> stored OOF predictions; members are used in ascending trial id
            order, so ties in greedy selection go to the lowest trial id.
        y: true targets.
        folds: fold id per row (the folds of the OOF predictions, reused as outer folds).
        metric: metric the search optimises.
        task: ``binary``, ``multiclass`` or ``regression``.
        classes: sorted class labels (``None`` for regression).
        rounds: picks of greedy selection.
    """
    ids = sorted(int(t) for t in members)
    preds = [np.asarray(members[t], dtype=float) for t in ids]
    score_fn = metrics.scorer(Metric(metric), classes)
    sgn = metrics.sign(Metric(metric))
    metric_name = str(Metric(metric).value)
    out: list[LibraryEnsemble] = []
    for method in METHODS:
        res = honest_score(
            method,
            preds,
            y,
            folds,
            score_fn,
            task=task,
            rounds=rounds,
            classes=classes,
            batch=lambda y_, p_: scores_on_rows(metric, y_, p_, classes),
        )
        common: dict[str, Any] = {
            "method": method,
            "metric": metric_name,
            "honest_mean": res.mean,
            "honest_std": res.std,
            "fold_scores": list(res.fold_scores),
            "in_sample_score": res.in_sample_score,
            "honest_mean_natural": sgn * res.mean,
            "in_sample_score_natural": sgn * res.in_sample_score,
        }
        if method == "selection":
            assert res.weights is not None
            keep = [i for i, w in enumerate(res.weights) if w > 0]
            out.append(
                LibraryEnsemble(
                    member_trial_ids=[ids[i] for i in keep],
                    weights=[float(res.weights[i]) for i in keep],
                    rounds=rounds,
                    **common,
                )
            )
            continue
        assert res.meta is not None
        model = res.meta.model
        coef = intercept = None
        if isinstance(model, LogisticRegression):
            coef = np.atleast_2d(model.coef_).astype(float).tolist()
            intercept = np.atleast_1d(model.intercept_).astype(float).tolist()
        out.append(
            LibraryEnsemble(
                member_trial_ids=list(ids),
                weights=None if res.weights is None else [float(w) for w in res.weights],
                meta_coef=coef,
                meta_intercept=intercept,
                fitted=res.meta,
                **common,
            )
        )
    return out
