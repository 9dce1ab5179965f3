"""The "voting" family: soft or hard votes (or averages) of 2–4 distinct learners."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from sklearn.ensemble import VotingClassifier, VotingRegressor
from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families._learners import (
    LEARNERS,
    Params,
    chosen_members,
    default_members,
    learner_names,
    learners_cost,
    suggest_members,
)

if TYPE_CHECKING:
    import optuna


class VotingFamily(BaseFamily):
    """``VotingClassifier``/``VotingRegressor`` over full learner pipelines.

    Members are chosen by the ``voting.use.<learner>`` flags (see
    :func:`~workers.families._learners.chosen_members`: 2 to 4 distinct learners), each with
    its space under ``voting.<learner>.`` and a weight ``voting.weight.<learner>`` in
    [0.1, 1]. Classification draws ``voting.voting`` (``soft`` averages probabilities,
    ``hard`` counts weighted labels); soft voting only offers learners with
    ``predict_proba``. Hard votes are not offered when the metric ranks probabilities (their
    one-hot output cannot compete there). Each member keeps its own preprocessing.
    """

    name = "voting"

    def _candidates(self, params: Params, ctx: FamilyContext) -> tuple[str, ...]:
        soft = params.get(self.key("voting"), "soft") == "soft"
        return learner_names(ctx, need_proba=soft)

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> Params:
        params: Params = {}
        if ctx.is_classification:
            key = self.key("voting")
            votes = ("soft",) if ctx.scores_probabilities else ("soft", "hard")
            params[key] = trial.suggest_categorical(key, votes)
        candidates = self._candidates(params, ctx)
        params.update(suggest_members(trial, ctx, self.name, candidates))
        for n in chosen_members(params, self.name, candidates):
            key = self.key(f"weight.{n}")
            params[key] = trial.suggest_float(key, 0.1, 1.0)
        return params

    def build(self, params: Params, ctx: FamilyContext) -> Any:
        members = chosen_members(params, self.name, self._candidates(params, ctx))
        estimators = [(n, LEARNERS[n].build(params, ctx, self.key(n))) for n in members]
        weights = [float(params[self.key(f"weight.{n}")]) for n in members]
        if ctx.is_classification:
            return VotingClassifier(
                estimators, voting=params[self.key("voting")], weights=weights, n_jobs=1
            )
        return VotingRegressor(estimators, weights=weights, n_jobs=1)

    def cost(self, params: Params, ctx: FamilyContext) -> float:
        return learners_cost(chosen_members(params, self.name, self._candidates(params, ctx)))

    def defaults(self, ctx: FamilyContext) -> list[Params]:
        """Equal-weight (soft) vote of LightGBM, the linear model and a random forest."""
        members = ("lgbm", "linear", "random_forest")
        params: Params = {self.key("voting"): "soft"} if ctx.is_classification else {}
        params.update(default_members(ctx, self.name, self._candidates(params, ctx), members))
        params.update({self.key(f"weight.{n}"): 1.0 for n in members})
        return [params]
