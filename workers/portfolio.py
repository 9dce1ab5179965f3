"""The learned portfolio: strong, diverse member configurations to try first, per task.

The configurations come from ``portfolio.json`` beside this module, a data file written by
``benchmarks/portfolio_study.py`` (greedy portfolio construction over a configurations ×
tables matrix of normalised cross-validated scores, learned offline on public tables that
are never used for comparisons). The file also lists its learning tables and how long the
study took. :func:`portfolio_for` hands the search schedule the configurations for one job,
in portfolio order, as Optuna parameter dicts ready for ``study.enqueue_trial``.

Every stored configuration is replayed through its family's own ``suggest`` on a checking
trial, so a configuration whose value lies outside today's search space (a renamed learner, a
narrowed range) is refused with a message naming the parameter, instead of reaching
``enqueue_trial`` and breaking the study.
"""

from __future__ import annotations

import functools
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from importlib import resources
from typing import Any

from tuttiml.workers.families import get_family
from tuttiml.workers.families._base import ALL_TASKS, FamilyContext

PORTFOLIO_FILE = "portfolio.json"
#: Version of the file layout this module reads.
FORMAT_VERSION = 1
REGENERATE = "regenerate it with benchmarks/portfolio_study.py"


class PortfolioError(ValueError):
    """The portfolio file is unreadable or holds a configuration outside the search space."""


@functools.cache
def load_portfolio() -> dict[str, Any]:
    """The parsed portfolio file shipped with the package (read once per process).

    Raises:
        PortfolioError: the file is missing, not JSON, or of another format version.
    """
    try:
        text = resources.files("tuttiml.workers").joinpath(PORTFOLIO_FILE).read_text("utf-8")
        data = json.loads(text)
    except (OSError, ValueError) as exc:
        raise PortfolioError(f"{PORTFOLIO_FILE}: cannot be read ({exc}); {REGENERATE}.") from exc
    if not isinstance(data, dict) or data.get("format") != FORMAT_VERSION:
        found = data.get("format") if isinstance(data, dict) else type(data).__name__
        raise PortfolioError(
            f"{PORTFOLIO_FILE}: format must be {FORMAT_VERSION}, found {found!r}; {REGENERATE}."
        )
    return data


class _CheckingTrial:
    """Answers a family's ``suggest`` calls from stored values, refusing any value the
    requested distribution does not hold (Optuna's own fixed trial only warns on a float or
    integer out of range)."""

    def __init__(self, values: dict[str, Any], where: str) -> None:
        self.values = values
        self.where = where

    def _value(self, name: str) -> Any:
        if name not in self.values:
            raise PortfolioError(f"{self.where}: parameter {name!r} is missing; {REGENERATE}.")
        return self.values[name]

    def suggest_categorical(self, name: str, choices: Sequence[Any]) -> Any:
        value = self._value(name)
        if not any(type(value) is type(c) and value == c for c in choices):
            raise PortfolioError(
                f"{self.where}: {name}={value!r} is not one of {list(choices)}; {REGENERATE}."
            )
        return value

    def suggest_int(self, name: str, low: int, high: int, *, log: bool = False) -> int:
        value = self._value(name)
        if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
            raise PortfolioError(
                f"{self.where}: {name}={value!r} must be an integer in [{low}, {high}]; "
                f"{REGENERATE}."
            )
        return value

    def suggest_float(self, name: str, low: float, high: float, *, log: bool = False) -> float:
        value = self._value(name)
        ok = isinstance(value, (int, float)) and not isinstance(value, bool)
        if not ok or not math.isfinite(value) or not low <= value <= high:
            raise PortfolioError(
                f"{self.where}: {name}={value!r} must be a number in [{low}, {high}]; "
                f"{REGENERATE}."
            )
        return float(value)


def checked_params(
    family: str, values: dict[str, Any], task: str, where: str = ""
) -> dict[str, Any]:
    """``values`` replayed through ``family``'s ``suggest`` for ``task``: the exact dict the
    sampler would have drawn (keys it does not ask for are dropped).

    Raises:
        PortfolioError: a value lies outside the family's search space, or one is missing.
        InvalidSpecError: ``family`` is not a registered family.
    """
    fam = get_family(family)
    trial = _CheckingTrial(values, where or f"{family} configuration")
    return fam.suggest(trial, FamilyContext(task=task))  # type: ignore[arg-type]


@dataclass(frozen=True)
class PortfolioEntry:
    """One portfolio configuration with what the study measured about it.

    Attributes:
        params: ``{"family": name, "<family>.<param>": value, ...}`` (enqueue-ready).
        gain: how much it raised the mean best normalised score on the learning tables when
            the greedy step added it (None in a provisional file).
        cpu_seconds: its mean CPU seconds per learning table in the study (k-fold CV on at
            most the study's row cap; None in a provisional file).
    """

    params: dict[str, Any]
    gain: float | None
    cpu_seconds: float | None


def portfolio_entries(task: str, families: Sequence[str]) -> list[PortfolioEntry]:
    """Like :func:`portfolio_for`, with each configuration's measured gain and cost (for a
    schedule that orders by expected gain per second).

    Raises:
        PortfolioError: as :func:`portfolio_for`.
    """
    if task not in ALL_TASKS:
        raise PortfolioError(f"task: must be one of {sorted(ALL_TASKS)}; got {task!r}.")
    wanted = set(families)
    entries = load_portfolio().get("portfolio", {}).get(task, [])
    out: list[PortfolioEntry] = []
    for i, entry in enumerate(entries):
        family = entry["family"]
        if family not in wanted or task not in get_family(family).tasks:
            continue
        where = f"{PORTFOLIO_FILE}: portfolio.{task}[{i}] ({family})"
        params = checked_params(family, entry["params"], task, where)
        out.append(
            PortfolioEntry(
                {"family": family, **params}, entry.get("gain"), entry.get("mean_cpu_seconds")
            )
        )
    return out


def portfolio_for(task: str, families: Sequence[str]) -> list[dict[str, Any]]:
    """The portfolio's configurations for ``task`` among ``families``, in portfolio order.

    Each item is ``{"family": name, "<family>.<param>": value, ...}``, the shape of a trial's
    parameters, ready for ``study.enqueue_trial``. Configurations of families not in
    ``families`` are left out; the order of the rest is the file's (greedy) order.

    Args:
        task: ``binary``, ``multiclass`` or ``regression``.
        families: the job's family names.

    Raises:
        PortfolioError: ``task`` is unknown, or the file is unreadable or holds a configuration
            outside today's search space (the message names the entry and parameter).
    """
    return [e.params for e in portfolio_entries(task, families)]


__all__ = [
    "PortfolioEntry",
    "PortfolioError",
    "checked_params",
    "load_portfolio",
    "portfolio_entries",
    "portfolio_for",
]
