"""Which probability calibrations a log-loss job may search, by training rows."""

from __future__ import annotations

import numpy as np
from sklearn.calibration import CalibratedClassifierCV
from sklearn.datasets import load_breast_cancer
from sklearn.naive_bayes import GaussianNB
from tuttiml.workers.candidates import ISOTONIC_MIN_ROWS, calibrations


def test_isotonic_is_offered_only_with_enough_rows() -> None:
    assert calibrations(ISOTONIC_MIN_ROWS - 1) == ("none", "sigmoid")
    assert calibrations(ISOTONIC_MIN_ROWS) == ("none", "sigmoid", "isotonic")


def test_isotonic_on_a_small_set_gives_certain_probabilities_sigmoid_never_does() -> None:
    """Why: isotonic regression is a step function that reaches 0 and 1 at its ends, so on a
    small calibration set some test rows get probability exactly 0 for a class — one such row
    of the true class makes log loss unbounded. Sigmoid (Platt) scaling stays inside (0, 1).
    Data: scikit-learn's bundled breast-cancer table, 150 training rows."""
    X, y = load_breast_cancer(return_X_y=True)
    rng = np.random.default_rng(0)
    rows = rng.permutation(len(y))
    train, test = rows[:150], rows[150:]
    iso = CalibratedClassifierCV(GaussianNB(), method="isotonic", cv=3).fit(X[train], y[train])
    sig = CalibratedClassifierCV(GaussianNB(), method="sigmoid", cv=3).fit(X[train], y[train])
    p_iso = iso.predict_proba(X[test])[:, 1]
    p_sig = sig.predict_proba(X[test])[:, 1]
    assert np.any((p_iso == 0.0) | (p_iso == 1.0))
    assert np.all((p_sig > 0.0) & (p_sig < 1.0))
