"""Contract test classes that per-implementation test modules subclass.

``FamilyContract`` checks what every ensemble family promises (STYLE section 8): ``suggest``
uses only prefixed names, defaults lie in the search space, ``build`` returns an unfitted
estimator that survives ``clone``, fit and predict work for each supported task, the same seed
gives the same predictions, and a skops round trip (with ``service.trusted.TRUSTED_TYPES``)
reproduces the predictions. Subclass it once per family and set ``family``.
"""

from __future__ import annotations

import time
from typing import Any, ClassVar

import numpy as np
import optuna
import pandas as pd
import pytest
import skops.io as sio
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.base import clone
from sklearn.datasets import make_classification, make_regression
from sklearn.exceptions import NotFittedError
from sklearn.utils.validation import check_is_fitted
from threadpoolctl import threadpool_limits
from tuttiml.service.trusted import TRUSTED_TYPES
from tuttiml.workers import metrics
from tuttiml.workers.families import FAMILIES
from tuttiml.workers.families._base import (
    BINARY,
    MULTICLASS,
    REGRESSION,
    BaseFamily,
    FamilyContext,
)

TASKS = (BINARY, MULTICLASS, REGRESSION)
N_ROWS, N_TRAIN = 160, 120


def family_data(task: str, seed: int = 0) -> tuple[pd.DataFrame, np.ndarray, FamilyContext]:
    """A tiny table in the worker's input layout, its target and the matching context.

    Four float columns (one with NaN), a low-cardinality categorical with missing values and a
    30-level categorical; class labels are strings so that label handling is exercised.
    """
    if task == REGRESSION:
        X, y = make_regression(n_samples=N_ROWS, n_features=4, noise=5.0, random_state=seed)
    else:
        X, y = make_classification(
            n_samples=N_ROWS,
            n_features=4,
            n_informative=3,
            n_redundant=0,
            n_classes=2 if task == BINARY else 3,
            random_state=seed,
        )
        y = np.array(["ant", "bee", "cat"], dtype=object)[y]
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(4)])
    frame.loc[rng.random(N_ROWS) < 0.1, "x0"] = np.nan
    color = rng.choice(["red", "green", "blue"], size=N_ROWS).astype(object)
    color[rng.random(N_ROWS) < 0.15] = np.nan
    frame["color"] = pd.Series(color, dtype=object)
    frame["city"] = pd.Series([f"c{i}" for i in rng.integers(0, 30, N_ROWS)], dtype=object)
    ctx = FamilyContext(
        task=task,
        random_state=seed,
        n_rows=N_TRAIN,
        numeric_columns=tuple(f"x{i}" for i in range(4)),
        categorical_columns=("color",),
        high_cardinality_columns=("city",),
        n_classes=0 if task == REGRESSION else len(np.unique(y)),
        row_cap=80,
    )
    return frame, y, ctx


def _classes(task: str, y: np.ndarray) -> np.ndarray | None:
    return None if task == REGRESSION else np.unique(y)


_CANDIDATES: dict[tuple[str, str], list[dict[str, Any]]] = {}
_FITTED: dict[tuple[str, str, int], tuple[Any, np.ndarray]] = {}


class FamilyContract:
    """Checks every family must pass; subclasses set ``family`` (and may lower ``n_sampled``)."""

    family: ClassVar[BaseFamily]
    n_sampled: ClassVar[int] = 2

    @pytest.fixture(autouse=True)
    def _one_thread(self) -> Any:
        """One native thread per fit, as in the workers (OpenMP in LightGBM and sklearn)."""
        with threadpool_limits(limits=1):
            yield

    # ---- helpers ---------------------------------------------------------------------------

    def _task(self, task: str) -> tuple[pd.DataFrame, np.ndarray, FamilyContext]:
        if task not in self.family.tasks:
            pytest.skip(f"{self.family.name} does not support {task}")
        return family_data(task)

    def candidates(self, task: str) -> list[dict[str, Any]]:
        """Defaults first, then ``n_sampled`` draws of a seeded random sampler."""
        key = (self.family.name, task)
        if key not in _CANDIDATES:
            _, _, ctx = self._task(task)
            drawn: list[dict[str, Any]] = []
            study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=7))
            study.optimize(
                lambda t: drawn.append(self.family.suggest(t, ctx)) or 0.0,
                n_trials=self.n_sampled,
            )
            _CANDIDATES[key] = [*self.family.defaults(ctx), *drawn]
        return _CANDIDATES[key]

    def fitted(self, task: str, index: int) -> tuple[Any, np.ndarray]:
        """Candidate ``index`` fitted on the first rows, with its stored-layout predictions."""
        key = (self.family.name, task, index)
        if key not in _FITTED:
            X, y, ctx = self._task(task)
            est = self.family.build(self.candidates(task)[index], ctx)
            est.fit(X.iloc[:N_TRAIN], y[:N_TRAIN])
            pred = metrics.predictions(est, X.iloc[N_TRAIN:], task, _classes(task, y))
            _FITTED[key] = (est, pred)
        return _FITTED[key]

    def all_indices(self, task: str) -> range:
        return range(len(self.candidates(task)))

    # ---- the contract ----------------------------------------------------------------------

    def test_registered_under_its_name(self) -> None:
        assert FAMILIES[self.family.name] is self.family
        assert self.family.tasks  # at least one task

    @pytest.mark.parametrize("task", TASKS)
    def test_suggest_uses_only_prefixed_names(self, task: str) -> None:
        _, _, ctx = self._task(task)
        prefix = f"{self.family.name}."
        study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=3))
        returned: list[dict[str, Any]] = []
        study.optimize(lambda t: returned.append(self.family.suggest(t, ctx)) or 0.0, n_trials=12)
        for trial, params in zip(study.trials, returned, strict=True):
            assert all(name.startswith(prefix) for name in trial.params), trial.params
            assert params == trial.params  # the returned dict is keyed by the Optuna names

    @pytest.mark.parametrize("task", TASKS)
    def test_defaults_lie_in_the_search_space(self, task: str) -> None:
        _, _, ctx = self._task(task)
        defaults = self.family.defaults(ctx)
        assert 1 <= len(defaults) <= 3
        study = optuna.create_study()
        for d in defaults:
            study.enqueue_trial(d)
        replayed: list[dict[str, Any]] = []
        study.optimize(
            lambda t: replayed.append(self.family.suggest(t, ctx)) or 0.0, n_trials=len(defaults)
        )
        for d, r in zip(defaults, replayed, strict=True):
            assert d == r  # suggest() draws exactly the enqueued default again

    @pytest.mark.parametrize("task", TASKS)
    def test_build_returns_unfitted_clonable_estimator(self, task: str) -> None:
        _, _, ctx = self._task(task)
        for params in self.candidates(task):
            est = self.family.build(params, ctx)
            twin = clone(est)
            assert twin.get_params().keys() == est.get_params().keys()
            with pytest.raises(NotFittedError):
                check_is_fitted(est)

    @pytest.mark.parametrize("task", TASKS)
    def test_fit_predict(self, task: str) -> None:
        _, y, _ = self._task(task)
        for index in self.all_indices(task):
            _, pred = self.fitted(task, index)
            assert np.all(np.isfinite(pred))
            if task == REGRESSION:
                assert pred.shape == (len(y) - N_TRAIN,)
            else:  # rows are probabilities (or one-hot labels) over the sorted classes
                assert pred.shape == (len(y) - N_TRAIN, len(np.unique(y)))
                assert_allclose(pred.sum(axis=1), 1.0, rtol=1e-6)

    @pytest.mark.parametrize("task", TASKS)
    def test_same_seed_same_predictions(self, task: str) -> None:
        X, y, ctx = self._task(task)
        index = len(self.candidates(task)) - 1  # a sampled candidate
        _, first = self.fitted(task, index)
        again = self.family.build(self.candidates(task)[index], ctx)
        again.fit(X.iloc[:N_TRAIN], y[:N_TRAIN])
        second = metrics.predictions(again, X.iloc[N_TRAIN:], task, _classes(task, y))
        assert_array_equal(first, second)

    @pytest.mark.parametrize("task", TASKS)
    def test_skops_round_trip_with_trusted_types(self, task: str) -> None:
        X, y, _ = self._task(task)
        for index in self.all_indices(task):
            est, pred = self.fitted(task, index)
            blob = sio.dumps(est)
            untrusted = set(sio.get_untrusted_types(data=blob))
            assert untrusted <= set(TRUSTED_TYPES), sorted(untrusted - set(TRUSTED_TYPES))
            loaded = sio.loads(blob, trusted=list(TRUSTED_TYPES))
            again = metrics.predictions(loaded, X.iloc[N_TRAIN:], task, _classes(task, y))
            assert_array_equal(pred, again)


class StoreContract:
    """What every job store must do, run against a real Redis server (no mocks).

    Subclasses provide a ``store`` fixture; ``tests/unit/test_store.py`` runs it on
    :class:`tuttiml.service.store.JobStore`.
    """

    @staticmethod
    def _job(store: Any, job_id: str = "c1", shards: int = 2) -> str:
        store.create_job(job_id, {"spec": "{}", "task": "binary", "schema": {}}, shards=shards)
        return job_id

    def test_tickets_never_exceed_the_budget(self, store: Any) -> None:
        job = self._job(store)
        got = [store.take_ticket(job, 3) for _ in range(5)]
        assert got == [1, 2, 3, None, None]
        store.return_ticket(job)
        assert store.take_ticket(job, 3) == 3  # the returned ticket is taken again
        assert store.take_ticket(job, 3) is None
        assert store.tickets(job) == 3

    def test_claim_field_has_one_winner(self, store: Any) -> None:
        job = self._job(store)
        assert [store.claim_field(job, "flag") for _ in range(3)] == [True, False, False]
        assert store.incr_field(job, "n") == 1
        assert store.incr_field(job, "n", 4) == 5

    def test_a_claim_has_one_holder_lapses_and_is_released_by_its_holder(self, store: Any) -> None:
        job = self._job(store)
        assert store.claim(job, "library", "w1", 30.0)
        assert not store.claim(job, "library", "w2", 30.0)  # held: one refresher at a time
        assert store.claim(job, "other", "w2", 30.0)  # another chore is independent
        store.release(job, "library", "w2")  # not the holder: nothing changes
        assert not store.claim(job, "library", "w2", 30.0)
        store.release(job, "library", "w1")
        assert store.claim(job, "library", "w2", 0.2)
        deadline = time.time() + 5
        while not store.claim(job, "library", "w3", 30.0):  # a dead holder's claim lapses
            assert time.time() < deadline
            time.sleep(0.05)

    def test_leases_expire_and_drop(self, store: Any) -> None:
        job = self._job(store)
        key = store.keys.trial_lease(job, 7)
        store.hold_lease(key, 1000)
        assert store.trial_leased(job, 7)
        store.drop_lease(key)
        assert not store.trial_leased(job, 7)
        store.hold_lease(store.keys.shard_lease(job, 0), 1000)
        store.hold_lease(store.keys.shard_lease(job, 3), 1000)
        assert store.running_shards(job) == 2
        time.sleep(1.3)
        assert store.running_shards(job) == 0

    def test_a_suspicion_is_remembered_until_cleared(self, store: Any) -> None:
        job = self._job(store)
        assert store.note_suspicion(job, "finalize", 100.0, 60) is None
        assert store.note_suspicion(job, "finalize", 130.0, 60) == 100.0
        store.clear_suspicion(job, "finalize")
        assert store.note_suspicion(job, "finalize", 140.0, 60) is None

    def test_journal_list_round_trips_and_pickles(self, store: Any) -> None:
        import pickle

        log = store.journal(self._job(store))
        log.append(["a", "b", "c"])
        again = pickle.loads(pickle.dumps(log))  # our own object, in-process only
        assert again.read(1, 5) == [b"b", b"c"]

    def test_committed_epoch_absent_before_a_commit(self, store: Any) -> None:
        assert store.committed_epoch(self._job(store)) is None

    def test_worker_heartbeat_expires(self, store: Any) -> None:
        store.put_worker("w1", {"pid": 1}, ttl=1)
        names = lambda: [k for k in store._r.scan_iter(match=store.keys.worker_alive("*"))]  # noqa: E731
        assert len(names()) == 1
        store.drop_worker("w1")
        assert names() == []
