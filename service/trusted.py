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
    # tutti's own estimators (workers/ensembling.py, workers/combining.py)
    "workers.combining.LinearCombinerClassifier",
    "workers.combining.LinearCombinerRegressor",
    "workers.ensembling.BlendingClassifier",
    "workers.ensembling.BlendingRegressor",
    "workers.ensembling.EarlyStoppingBoosterClassifier",
    "workers.ensembling.EarlyStoppingBoosterRegressor",
    "workers.ensembling.FrameNormalizer",
    "workers.ensembling.RowCap",
)

__all__ = ["TRUSTED_TYPES"]
