"""Candidate building: a family's estimator, its probability calibration, and refit rules.

The calibration choices a trial may draw sit beside the builder that applies them, so the
search space and the estimator cannot drift apart. Used by the trial process (evaluate,
refit) and by the explanations (re-evaluating candidates on other folds).
"""

from __future__ import annotations

from typing import Any

from sklearn.pipeline import Pipeline
from tuttiml.service.spec import Metric
from tuttiml.workers import ensembling
from tuttiml.workers.datasets import Dataset
from tuttiml.workers.families import get_family

CALIBRATIONS = ("none", "sigmoid", "isotonic")
#: Isotonic calibration overfits small calibration sets; scikit-learn's user guide (section
#: "Probability calibration") advises it only with more than ~1,000 calibration samples
#: (from memory). The inner 3-fold split calibrates on a third of the training rows.
ISOTONIC_MIN_ROWS = 3000


def calibrations(n_rows: int) -> tuple[str, ...]:
    """Calibration choices for a job whose folds train on ``n_rows`` rows."""
    return CALIBRATIONS if n_rows >= ISOTONIC_MIN_ROWS else ("none", "sigmoid")


CALIBRATED_METRICS = frozenset({Metric.LOG_LOSS})


def build_candidate(family: Any, params: dict[str, Any], ctx: Any) -> Any:
    """The family's estimator, wrapped in probability calibration when the trial chose one.

    ``CalibratedClassifierCV`` fits the candidate and its calibration map on an inner 3-fold
    split of whatever rows it is given, so calibration stays inside each training fold.
    """
    method = params.pop("calibration", "none")
    est = family.build(params, ctx)
    scores_rows = hasattr(est, "predict_proba") or hasattr(est, "decision_function")
    # a label-only model (hard vote) has nothing to calibrate: it is scored as it is
    if method in ("sigmoid", "isotonic") and ctx.is_classification and scores_rows:
        from sklearn.calibration import CalibratedClassifierCV

        est = CalibratedClassifierCV(est, method=method, cv=3)
    return est


def refit_candidate(member: dict[str, Any], data: Dataset, seed: int) -> Any:
    """Build one candidate and apply the stated refit rule for boosting rounds."""
    family = get_family(member["family"])
    ctx = data.context(seed)
    est = build_candidate(family, dict(member["params"]), ctx)
    per_path: dict[str, list[int]] = {}
    for info in member.get("fit_info") or []:
        for path, rounds in info.items():
            per_path.setdefault(path, []).append(int(rounds))
    if per_path:
        n_all = len(data.search_rows)
        est.set_params(
            **{p: ensembling.refit_rounds(v, ctx.n_rows, n_all) for p, v in per_path.items()}
        )
    return est


def _short(est: Any) -> str:
    name = type(est).__name__
    inner = getattr(est, "estimator", None)
    if inner is not None and not isinstance(inner, str):
        return f"{name}({_short(_last_step(inner))})"
    return name


def _last_step(est: Any) -> Any:
    while isinstance(est, Pipeline):
        est = est.steps[-1][1]
    return est


def describe_members(est: Any) -> str:
    """Human-readable members of a candidate: member names for composites, else the model."""
    model = _last_step(est)
    members = getattr(model, "estimators", None)
    if isinstance(members, list) and members and isinstance(members[0], tuple):
        return ",".join(str(name) for name, m in members if m != "drop")
    return _short(model)
