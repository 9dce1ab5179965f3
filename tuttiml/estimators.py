"""The one stable import path of tutti's estimators inside exported pipelines.

Exported ``.skops`` files record each object's class path. tutti's own estimators claim this
module as theirs, so a file keeps loading whatever the code inside ``tuttiml.workers`` is
called later. Files exported before the namespace existed name ``workers.ensembling`` /
``workers.combining``; :func:`tuttiml.service.artifacts.load_pipeline` maps those here.
"""

from tuttiml.workers.combining import LinearCombinerClassifier, LinearCombinerRegressor
from tuttiml.workers.ensembling import (
    BlendingClassifier,
    BlendingRegressor,
    EarlyStoppingBoosterClassifier,
    EarlyStoppingBoosterRegressor,
    FrameNormalizer,
    RowCap,
    UserLabels,
)

__all__ = [
    "BlendingClassifier",
    "BlendingRegressor",
    "EarlyStoppingBoosterClassifier",
    "EarlyStoppingBoosterRegressor",
    "FrameNormalizer",
    "LinearCombinerClassifier",
    "LinearCombinerRegressor",
    "RowCap",
    "UserLabels",
]
