"""Types a skops load of an exported tutti pipeline must trust beyond skops' own defaults.

Found by running ``skops.io.get_untrusted_types`` over every family's default and many
sampled candidates, fitted for each task (``tests/unit/test_families.py`` keeps this list
complete). Only these names are trusted on load; anything else in a file is refused.
Standard library only, so the client can import it without the worker's dependencies.
"""

from __future__ import annotations

TRUSTED_TYPES: tuple[str, ...] = (
    # containers and numpy metadata inside fitted estimators
    "collections.OrderedDict",
    "numpy.dtype",
    "sklearn.utils._bunch.Bunch",
    # LightGBM
    "lightgbm.basic.Booster",
    "lightgbm.sklearn.LGBMClassifier",
    "lightgbm.sklearn.LGBMRegressor",
    # scikit-learn internals of fitted estimators
    "sklearn.calibration._CalibratedClassifier",
    "sklearn.calibration._SigmoidCalibration",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
    "sklearn.metrics._dist_metrics.EuclideanDistance64",
    "sklearn.model_selection._split.KFold",
    "sklearn.model_selection._split.StratifiedKFold",
    "sklearn.neighbors._ball_tree.BallTree",
    "sklearn.neighbors._kd_tree.KDTree",
    "sklearn.neural_network._stochastic_optimizers.AdamOptimizer",
    "sklearn.tree._tree.Tree",
    # tutti's own estimators, at their one stable path (tuttiml/estimators.py)
    *(
        f"tuttiml.estimators.{name}"
        for name in (
            "BlendingClassifier",
            "BlendingRegressor",
            "EarlyStoppingBoosterClassifier",
            "EarlyStoppingBoosterRegressor",
            "FrameNormalizer",
            "LinearCombinerClassifier",
            "LinearCombinerRegressor",
            "RowCap",
            "UserLabels",
        )
    ),
)

# Module paths that files exported before the ``tuttiml`` namespace recorded, and where those
# classes live now. Loading rewrites them (``service.artifacts``); nothing is imported from them.
LEGACY_MODULES: dict[str, str] = {
    "workers.ensembling": "tuttiml.estimators",
    "workers.combining": "tuttiml.estimators",
}

__all__ = ["LEGACY_MODULES", "TRUSTED_TYPES"]
