"""The schedule: portfolio first, members before composites, then expected gain per second."""

from __future__ import annotations

import sys
import types
from typing import Any

import pytest
from scipy.stats import norm
from tuttiml.workers.families import FAMILIES
from tuttiml.workers.families._base import FamilyContext
from tuttiml.workers.schedule import (
    COMPOSITE_AFTER,
    MEMBER_FAMILIES,
    Budget,
    arms_from_rows,
    choose_arm,
    choose_family,
    default_trials,
    expected_improvement,
    fixed_params,
    gain_per_second,
    portfolio_trials,
)

ALL = ("bagging", "blending", "boosting", "single", "stacking", "voting")
CTX = FamilyContext(task="binary", n_rows=800, numeric_columns=("a", "b"), n_classes=2)
EARLY = Budget(spent=0.1, seconds_left=100.0)
LATE = Budget(spent=COMPOSITE_AFTER + 0.1, seconds_left=1000.0)


def _rows(family: str, scores: list[float | None], seconds: float) -> list[dict[str, Any]]:
    """Trial rows of one family (``None`` = a pruned trial)."""
    return [
        {
            "family": family,
            "state": "pruned" if s is None else "complete",
            "score": s,
            "seconds": seconds,
        }
        for s in scores
    ]


@pytest.mark.parametrize(
    ("mean", "spread", "best"), [(0.8, 0.05, 0.85), (0.9, 0.02, 0.85), (0.1, 1.0, -0.3)]
)
def test_expected_improvement_matches_the_normal_closed_form(
    mean: float, spread: float, best: float
) -> None:
    # reference: E[max(0, S - best)] = (mean - best) * Phi(z) + spread * phi(z),
    # z = (mean - best) / spread (Jones, Schonlau and Welch 1998), computed with scipy.stats
    z = (mean - best) / spread
    ref = (mean - best) * norm.cdf(z) + spread * norm.pdf(z)
    assert expected_improvement(mean, spread, best) == pytest.approx(ref, rel=1e-9)
    # and by Monte Carlo from scipy's sampler (a second, independent reference)
    draws = norm.rvs(mean, spread, size=400_000, random_state=0)
    mc = float((draws - best).clip(min=0).mean())
    assert expected_improvement(mean, spread, best) == pytest.approx(mc, rel=0.02, abs=1e-5)


def test_untried_member_families_run_first_cheapest_first_and_composites_wait() -> None:
    first = choose_family(ALL, [], EARLY, CTX)
    assert first in MEMBER_FAMILIES
    rows = _rows("single", [0.8], 1.0)
    second = choose_family(ALL, rows, EARLY, CTX)
    assert second in MEMBER_FAMILIES - {"single"}
    # every member family tried, composites still wait early in the budget
    rows += _rows("boosting", [0.82, 0.83], 1.0) + _rows("bagging", [0.81, 0.80], 3.0)
    assert choose_family(ALL, rows, EARLY, CTX) in MEMBER_FAMILIES


def test_composites_are_explored_late_once_members_are_scored() -> None:
    rows = _rows("single", [0.8, 0.81], 1.0) + _rows("boosting", [0.82, 0.83], 1.0)
    rows += _rows("bagging", [0.81], 3.0)
    late = choose_family(ALL, rows, LATE, CTX)
    assert late in {"voting", "stacking", "blending"}
    # the same rows with too little time left for a composite's fits: members go on
    short = Budget(spent=0.95, seconds_left=1.0)
    assert choose_family(ALL, rows, short, CTX) in MEMBER_FAMILIES
    # a job that searches only composites runs them from the start
    assert choose_family(("voting", "stacking"), [], EARLY, CTX) in {"voting", "stacking"}


def test_gain_per_second_prefers_the_cheaper_of_two_equal_arms() -> None:
    rows = _rows("single", [0.80, 0.82, 0.81], 1.0) + _rows("boosting", [0.80, 0.82, 0.81], 10.0)
    rows += _rows("bagging", [None, None], 2.0)
    assert choose_family(("single", "boosting", "bagging"), rows, EARLY, CTX) == "single"
    arms = arms_from_rows(rows)
    assert arms["bagging"].n == 2 and arms["bagging"].scores == ()
    # an arm that only ever got pruned has no expected gain while others do
    assert gain_per_second(arms["bagging"], 0.82, 0.01) == 0.0
    assert gain_per_second(arms["single"], 0.82, 0.01) == pytest.approx(
        10 * gain_per_second(arms["boosting"], 0.82, 0.01)
    )


def test_a_much_better_arm_wins_even_when_slower() -> None:
    rows = _rows("single", [0.70, 0.71, 0.70, 0.69], 1.0)
    rows += _rows("boosting", [0.90, 0.91, 0.92, 0.905], 4.0)
    assert choose_family(("single", "boosting"), rows, EARLY, CTX) == "boosting"


def test_without_a_learned_portfolio_members_defaults_start_cheapest_first(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.setitem(sys.modules, "tuttiml.workers.portfolio", None)  # import fails
    start = portfolio_trials(ALL, CTX)
    assert {name for name, _ in start} == {"single", "bagging", "boosting"}
    expected = default_trials(("single", "bagging", "boosting"), CTX)
    assert start == expected
    costs = [FAMILIES[name].cost(p, CTX) for name, p in start]
    assert costs == sorted(costs)
    # composites only: their own defaults
    only = portfolio_trials(("voting", "stacking"), CTX)
    assert {name for name, _ in only} == {"voting", "stacking"}


def test_a_learned_portfolio_runs_in_its_own_order(monkeypatch: pytest.MonkeyPatch) -> None:
    boost = FAMILIES["boosting"].defaults(CTX)
    single = FAMILIES["single"].defaults(CTX)
    seen: list[tuple[str, list[str]]] = []

    def portfolio_for(task: str, families: list[str]) -> list[dict[str, Any]]:
        seen.append((task, list(families)))
        return [
            {"family": "boosting", **boost[1]},
            {"family": "voting", **FAMILIES["voting"].defaults(CTX)[0]},  # not asked for
            {"family": "single", **single[0]},
        ]

    fake = types.ModuleType("tuttiml.workers.portfolio")
    fake.portfolio_for = portfolio_for  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "tuttiml.workers.portfolio", fake)
    start = portfolio_trials(ALL, CTX)
    assert start == [("boosting", boost[1]), ("single", single[0])]
    assert seen == [("binary", ["bagging", "boosting", "single"])]


def test_a_broken_portfolio_falls_back_to_the_defaults_and_says_so(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    def portfolio_for(task: str, families: list[str]) -> list[dict[str, Any]]:
        raise ValueError("portfolio.json: unreadable")

    fake = types.ModuleType("tuttiml.workers.portfolio")
    fake.portfolio_for = portfolio_for  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "tuttiml.workers.portfolio", fake)
    said: list[str] = []
    start = portfolio_trials(ALL, CTX, on_error=said.append)
    assert start == default_trials(("single", "bagging", "boosting"), CTX)
    assert len(said) == 1 and "portfolio.json: unreadable" in said[0]


def test_a_leading_learner_is_tuned_on_its_own() -> None:
    def rows(learner: str, scores: list[float], seconds: float) -> list[dict[str, Any]]:
        out = _rows("single", list(scores), seconds)
        for r in out:
            r["params"] = {"single.learner": learner}
        return out

    history = rows("lgbm", [0.90, 0.91, 0.92], 1.0) + rows("knn", [0.70, 0.72, 0.71], 0.5)
    history += _rows("boosting", [0.85, 0.86], 1.5)
    arms = arms_from_rows(history)
    assert arms["single"].n == 6 and arms["single|lgbm"].n == 3
    arm = choose_arm(("single", "boosting"), history, EARLY, CTX)
    assert arm == "single|lgbm"
    # the family's own arm (the sampler picks a learner: new ones get tried) has its share
    sampled = [dict(r, arm="single|lgbm") for r in rows("lgbm", [0.915] * 3, 1.0)]
    assert choose_arm(("single", "boosting"), history + sampled[:1], EARLY, CTX) == "single"
    assert choose_arm(("single", "boosting"), history + sampled, EARLY, CTX) == "single"
    explored = [dict(r, arm="single") for r in rows("knn", [0.7], 0.5)]
    assert choose_arm(("single", "boosting"), history + sampled + explored, EARLY, CTX) == (
        "single|lgbm"
    )
    assert fixed_params(arm) == {"family": "single", "single.learner": "lgbm"}
    assert fixed_params("boosting") == {"family": "boosting"}


def test_without_measured_seconds_the_choice_does_not_depend_on_timing() -> None:
    """One shard ranks by the families' cost estimates (rows' ``cost``), so two runs of the
    same job pick the same arms however long their trials took."""
    fast = _rows("single", [0.80, 0.82, 0.81], 1.0)
    slow = _rows("boosting", [0.80, 0.82, 0.81], 10.0)
    for r in fast:
        r["cost"] = 10.0
    for r in slow:
        r["cost"] = 1.2
    families = ("single", "boosting")
    assert choose_family(families, fast + slow, EARLY, CTX) == "single"
    assert choose_family(families, fast + slow, EARLY, CTX, measured=False) == "boosting"
    for r in fast + slow:  # other timings, same choice
        r["seconds"] *= 7.0 if r["family"] == "single" else 0.1
    assert choose_family(families, fast + slow, EARLY, CTX, measured=False) == "boosting"


def test_an_arm_cheap_only_because_it_is_pruned_does_not_look_cheap() -> None:
    """Mostly pruned trials cost little but gain nothing: the arm's gain is weighted by its
    chance to complete."""
    pruned_often = _rows("single", [0.80, 0.82, 0.81], 3.0) + _rows("single", [None] * 12, 0.5)
    completes = _rows("boosting", [0.80, 0.82, 0.81], 2.0)
    assert choose_family(("single", "boosting"), pruned_often + completes, EARLY, CTX) == (
        "boosting"
    )
    arms = arms_from_rows(pruned_often)
    assert arms["single"].n == 15 and len(arms["single"].scores) == 3
    assert arms["single"].seconds == pytest.approx((3 * 3.0 + 12 * 0.5) / 15)  # the mean
