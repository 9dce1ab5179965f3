"""The one module allowed to reach into scikit-learn's private helpers.

Private names move between scikit-learn releases; keeping every such import here means an upgrade
touches one file. Each name is re-exported under a public alias that the rest of ``workers``
imports.
"""

from __future__ import annotations

from types import ModuleType

from sklearn.utils import _safe_indexing
from sklearn.utils._optional_dependencies import check_pandas_support
from sklearn.utils.metaestimators import _BaseComposition

#: Base class giving ``get_params``/``set_params`` support for a list of ``(name, estimator)``
#: pairs, so that nested parameter paths such as ``"lgbm__fixed_rounds"`` can be set.
NamedEstimatorsBase = _BaseComposition


def take_rows(X: object, indices: object) -> object:
    """Rows ``indices`` of an array, sparse matrix or DataFrame, keeping its container type."""
    return _safe_indexing(X, indices, axis=0)


def pandas_module(caller: str) -> ModuleType:
    """Import pandas the way scikit-learn does for optional pandas support.

    Args:
        caller: name shown in the ImportError when pandas is not installed.

    Raises:
        ImportError: pandas is not installed.
    """
    return check_pandas_support(caller)


__all__ = ["NamedEstimatorsBase", "pandas_module", "take_rows"]
