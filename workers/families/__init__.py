"""Registry of ensemble families: an explicit dict literal, no discovery."""

from __future__ import annotations

from tuttiml.service.errors import InvalidSpecError
from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families.bagging import BaggingFamily
from tuttiml.workers.families.blending import BlendingFamily
from tuttiml.workers.families.boosting import BoostingFamily
from tuttiml.workers.families.single import SingleFamily
from tuttiml.workers.families.stacking import StackingFamily
from tuttiml.workers.families.voting import VotingFamily

FAMILIES: dict[str, BaseFamily] = {
    "bagging": BaggingFamily(),
    "blending": BlendingFamily(),
    "boosting": BoostingFamily(),
    "single": SingleFamily(),
    "stacking": StackingFamily(),
    "voting": VotingFamily(),
}


def get_family(name: str) -> BaseFamily:
    """The registered family called ``name``.

    Raises:
        InvalidSpecError: no family has that name; the message lists the known names.
    """
    try:
        return FAMILIES[name]
    except (KeyError, TypeError):
        raise InvalidSpecError(
            f"family: unknown family {name!r} ({type(name).__name__}); "
            f"choose one of {', '.join(FAMILIES)}.",
            field="family",
            value=name,
        ) from None


__all__ = ["FAMILIES", "BaseFamily", "FamilyContext", "get_family"]
