"""The "blending" family: a meta-model fitted on members' predictions for held-out rows."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from tuttiml.workers.ensembling import BlendingClassifier, BlendingRegressor
from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families._learners import (
    LEARNERS,
    Params,
    chosen_members,
    default_members,
    default_meta,
    learner_names,
    learners_cost,
    make_meta,
    suggest_members,
    suggest_meta,
)

if TYPE_CHECKING:
    import optuna


class BlendingFamily(BaseFamily):
    """:class:`~workers.ensembling.BlendingClassifier`/``Regressor`` over learner pipelines.

    Members: 2–4 distinct learners chosen by ``blending.use.<learner>`` flags, each a full
    pipeline with its own preprocessing (spaces under ``blending.<learner>.``).
    ``blending.holdout_fraction`` (0.1–0.3) is the share of the training rows the meta-model
    (``blending.meta``) is fitted on; members are then refitted on all rows. Cheaper than
    stacking (one member fit on part of the rows plus one on all, instead of cv + 1 fits).
    """

    name = "blending"

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> Params:
        params = suggest_members(trial, ctx, self.name, learner_names(ctx))
        key = self.key("holdout_fraction")
        params[key] = trial.suggest_float(key, 0.1, 0.3)
        params.update(suggest_meta(trial, ctx, self.name))
        return params

    def build(self, params: Params, ctx: FamilyContext) -> Any:
        members = chosen_members(params, self.name, learner_names(ctx))
        estimators = [(n, LEARNERS[n].build(params, ctx, self.key(n))) for n in members]
        cls = BlendingClassifier if ctx.is_classification else BlendingRegressor
        return cls(
            estimators,
            final_estimator=make_meta(params, ctx, self.name),
            holdout_fraction=float(params[self.key("holdout_fraction")]),
            random_state=ctx.random_state,
        )

    def cost(self, params: Params, ctx: FamilyContext) -> float:
        """Members fitted twice: on the training share, then on all rows."""
        return 2 * learners_cost(chosen_members(params, self.name, learner_names(ctx)))

    def defaults(self, ctx: FamilyContext) -> list[Params]:
        """LightGBM, linear model and random forest, 20% hold-out, linear meta-model."""
        params = default_members(
            ctx, self.name, learner_names(ctx), ("lgbm", "linear", "random_forest")
        )
        params.update({self.key("holdout_fraction"): 0.2, **default_meta(self.name)})
        return [params]
