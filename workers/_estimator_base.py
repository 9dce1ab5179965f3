"""Small helpers shared by tutti's own estimators (kept light: they ship in exported files)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

# Exported files record this path (see tuttiml/estimators.py); keep it when moving code.
STABLE_MODULE = "tuttiml.estimators"


def _require(owner: object, name: str, value: Any, ok: bool, rule: str) -> None:
    """Raise the section-7 style ValueError when a constructor argument breaks its rule."""
    if not ok:
        raise ValueError(
            f"{type(owner).__name__}.{name}: must be {rule}; got {value!r} "
            f"({type(value).__name__}). Pass a value that satisfies the rule."
        )


def _is_frame(X: Any) -> bool:
    return hasattr(X, "iloc") and hasattr(X, "columns")


def _has_method(attr: str, inner: str) -> Callable[[Any], bool]:
    """``available_if`` check: the fitted inner estimator (or its template) has ``attr``."""

    def check(self: Any) -> bool:
        fitted = getattr(self, inner + "_", None)
        template = getattr(self, inner)
        if template is None and hasattr(self, "_default_" + inner):
            template = getattr(self, "_default_" + inner)()
        return hasattr(fitted if fitted is not None else template, attr)

    return check
