"""The "single" family: one base learner from the library, with its own preprocessing."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families._learners import LEARNERS, Params, learner_names, learners_cost

if TYPE_CHECKING:
    import optuna


class SingleFamily(BaseFamily):
    """One learner, chosen by the categorical ``single.learner``.

    The learner's hyperparameters live under ``single.<learner>.`` so that the spaces of
    different learners never share a name. Useful on its own and as the yardstick the
    ensembles have to beat.
    """

    name = "single"

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> Params:
        learner = trial.suggest_categorical(self.key("learner"), learner_names(ctx))
        params: Params = {self.key("learner"): learner}
        params.update(LEARNERS[learner].suggest(trial, ctx, self.key(learner)))
        return params

    def build(self, params: Params, ctx: FamilyContext) -> Any:
        learner = params[self.key("learner")]
        if learner not in learner_names(ctx):
            raise ValueError(
                f"{self.key('learner')}: unknown learner {learner!r} for task {ctx.task!r}; "
                f"choose one of {', '.join(learner_names(ctx))}."
            )
        return LEARNERS[learner].build(params, ctx, self.key(learner))

    def cost(self, params: Params, ctx: FamilyContext) -> float:
        return learners_cost([params[self.key("learner")]])

    def defaults(self, ctx: FamilyContext) -> list[Params]:
        """LightGBM and the linear model, each with its library defaults."""
        return [
            {self.key("learner"): name, **LEARNERS[name].defaults(ctx, self.key(name))}
            for name in ("lgbm", "linear")
        ]
