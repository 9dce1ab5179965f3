"""The "bagging" family: bootstrap ensembles of one base learner, and the random forests."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from sklearn.ensemble import BaggingClassifier, BaggingRegressor
from sklearn.pipeline import Pipeline
from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families._learners import LEARNERS, Params, learner_names, learners_cost

if TYPE_CHECKING:
    import optuna

#: Tree-specialised bagging: the forests bag trees and subsample features at each split.
FORESTS = ("random_forest", "extra_trees")
#: Base learners that ``BaggingClassifier``/``BaggingRegressor`` may wrap.
BAGGED = ("tree", "linear", "knn", "naive_bayes")


class BaggingFamily(BaseFamily):
    """Bagging: ``bagging.kind`` is a forest or ``"bagged"`` (sklearn Bagging over a learner).

    For ``"bagged"``, the base learner is ``bagging.base`` with its space under
    ``bagging.<base>.``, and the ensemble knobs are ``n_estimators``, ``max_samples``,
    ``max_features``, ``bootstrap`` and ``bootstrap_features``. The table is preprocessed
    once, in front of the ensemble (``Pipeline(prep, Bagging(model))``), because
    ``Bagging*`` converts its input to an array and subsamples the encoded features.
    """

    name = "bagging"

    def _bases(self, ctx: FamilyContext) -> tuple[str, ...]:
        return learner_names(ctx, among=BAGGED)

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> Params:
        kind = trial.suggest_categorical(self.key("kind"), (*FORESTS, "bagged"))
        params: Params = {self.key("kind"): kind}
        if kind in FORESTS:
            params.update(LEARNERS[kind].suggest(trial, ctx, self.key(kind)))
            return params
        base = trial.suggest_categorical(self.key("base"), self._bases(ctx))
        params[self.key("base")] = base
        params.update(LEARNERS[base].suggest(trial, ctx, self.key(base)))
        params.update(
            {
                self.key("n_estimators"): trial.suggest_int(
                    self.key("n_estimators"), 10, 100, log=True
                ),
                self.key("max_samples"): trial.suggest_float(self.key("max_samples"), 0.3, 1.0),
                self.key("max_features"): trial.suggest_float(self.key("max_features"), 0.3, 1.0),
                self.key("bootstrap"): trial.suggest_categorical(
                    self.key("bootstrap"), (True, False)
                ),
                self.key("bootstrap_features"): trial.suggest_categorical(
                    self.key("bootstrap_features"), (False, True)
                ),
            }
        )
        return params

    def build(self, params: Params, ctx: FamilyContext) -> Any:
        kind = params[self.key("kind")]
        if kind in FORESTS:
            return LEARNERS[kind].build(params, ctx, self.key(kind))
        base = params[self.key("base")]
        learner = LEARNERS[base]
        cls = BaggingClassifier if ctx.is_classification else BaggingRegressor
        ensemble = cls(
            estimator=learner.model(params, ctx, self.key(base)),
            n_estimators=params[self.key("n_estimators")],
            max_samples=params[self.key("max_samples")],
            max_features=params[self.key("max_features")],
            bootstrap=params[self.key("bootstrap")],
            bootstrap_features=params[self.key("bootstrap_features")],
            n_jobs=1,
            random_state=ctx.random_state,
        )
        return Pipeline([("prep", learner.preprocessor(ctx)), ("model", ensemble)])

    def cost(self, params: Params, ctx: FamilyContext) -> float:
        """A forest as its learner; a bagged learner by member count and row share (the table
        is preprocessed once, so a member costs about a third of the full pipeline)."""
        kind = params[self.key("kind")]
        if kind in FORESTS:
            return learners_cost([kind])
        share = params[self.key("n_estimators")] * params[self.key("max_samples")]
        return 0.35 * share * learners_cost([params[self.key("base")]])

    def defaults(self, ctx: FamilyContext) -> list[Params]:
        """A 200-tree random forest and 50 bagged decision trees."""
        forest = {
            self.key("kind"): "random_forest",
            **LEARNERS["random_forest"].defaults(ctx, self.key("random_forest")),
        }
        bagged = {
            self.key("kind"): "bagged",
            self.key("base"): "tree",
            **LEARNERS["tree"].defaults(ctx, self.key("tree")),
            self.key("n_estimators"): 50,
            self.key("max_samples"): 1.0,
            self.key("max_features"): 1.0,
            self.key("bootstrap"): True,
            self.key("bootstrap_features"): False,
        }
        bagged[self.key("tree.max_depth")] = 12
        bagged[self.key("tree.min_samples_leaf")] = 1
        return [forest, bagged]
