"""BaseFamily: the contract every ensemble family module fulfils, and the context it builds in."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

if TYPE_CHECKING:
    import optuna

BINARY = "binary"
MULTICLASS = "multiclass"
REGRESSION = "regression"
ALL_TASKS: frozenset[str] = frozenset({BINARY, MULTICLASS, REGRESSION})


@dataclass(frozen=True)
class FamilyContext:
    """What a family may know about the data when it suggests and builds a candidate.

    The table a built estimator is fitted on is a pandas DataFrame whose numeric columns are
    float (NaN for missing) and whose categorical columns are ``object`` holding ``str``
    (NaN for missing); nothing else. Columns are listed by kind so that each learner can
    carry its own preprocessing, fitted inside the folds.

    Attributes:
        task: ``binary``, ``multiclass`` or ``regression``.
        random_state: seed passed to every estimator the family builds.
        n_rows: training rows of one CV fold (for row caps and round limits).
        numeric_columns: float columns.
        categorical_columns: low-cardinality categorical columns (one-hot friendly).
        high_cardinality_columns: categorical columns with many levels (target-encoded).
        n_classes: number of classes (0 for regression).
        row_cap: training rows above which learners with super-linear cost subsample.
        scores_probabilities: the job's metric ranks predicted probabilities (log loss, ROC
            AUC): label-only candidates (a hard vote's one-hot output) cannot compete there,
            so families do not offer them.
    """

    task: str
    random_state: int = 0
    n_rows: int = 1000
    numeric_columns: tuple[str, ...] = ()
    categorical_columns: tuple[str, ...] = ()
    high_cardinality_columns: tuple[str, ...] = ()
    n_classes: int = 0
    row_cap: int = 5000
    scores_probabilities: bool = False
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def is_classification(self) -> bool:
        return self.task != REGRESSION


class BaseFamily:
    """One ensemble family: its search space and the builder of its estimators.

    Subclasses set ``name`` and ``tasks`` and implement three methods. They do no I/O and
    never touch Redis; optuna is imported only for type checking.

    - ``suggest(trial, ctx)`` draws the family's hyperparameters. Every Optuna parameter name
      starts with ``f"{name}."`` so that families never collide in one study. Returns the
      drawn values keyed by those same names.
    - ``build(params, ctx)`` returns an *unfitted* scikit-learn compatible estimator (it must
      survive ``sklearn.base.clone``) that accepts the raw table described in
      :class:`FamilyContext`, i.e. it carries its own preprocessing.
    - ``defaults(ctx)`` returns parameter dicts (same keys ``suggest`` would draw) of sound
      default configurations, tried before the sampler takes over.
    - ``cost(params, ctx)`` (optional) estimates one fit of a candidate relative to a default
      LightGBM; the defaults of all families run cheapest first, so that a short job still
      sees several families and the trial library has diverse members early.
    """

    name: ClassVar[str] = ""
    tasks: ClassVar[frozenset[str]] = ALL_TASKS

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> dict[str, Any]:
        raise NotImplementedError

    def build(self, params: dict[str, Any], ctx: FamilyContext) -> Any:
        raise NotImplementedError

    def defaults(self, ctx: FamilyContext) -> list[dict[str, Any]]:
        raise NotImplementedError

    def cost(self, params: dict[str, Any], ctx: FamilyContext) -> float:
        return 1.0

    def key(self, param: str) -> str:
        """Prefixed Optuna parameter name for this family."""
        return f"{self.name}.{param}"
