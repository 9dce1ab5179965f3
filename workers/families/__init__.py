"""Registry of ensemble families: an explicit dict literal, no discovery."""

from __future__ import annotations

from service.errors import InvalidSpecError
from workers.families._base import BaseFamily, FamilyContext
from workers.families.bagging import BaggingFamily
from workers.families.blending import BlendingFamily
from workers.families.boosting import BoostingFamily
from workers.families.single import SingleFamily
from workers.families.stacking import StackingFamily
from workers.families.voting import VotingFamily

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
