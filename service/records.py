"""Typed, versioned records: what crosses a process or time boundary, defined once.

A record is written by one side (a client, a worker, a later version of tutti) and read back
by another, so each is a frozen pydantic model with a ``schema_version``: the writer dumps it
to JSON-safe data with :meth:`Record.dump`, the reader validates it with
:meth:`Record.load`, and a record stored by an older version (without the field) still loads.
Scores inside records are greater-is-better; :func:`tuttiml.service.spec.natural` converts
them at the presentation edge only.
"""

from __future__ import annotations

from typing import Any, Literal, Self

from pydantic import BaseModel, ConfigDict, Field, field_validator
from tuttiml.service.spec import Metric, natural


class Record(BaseModel):
    """Base of every stored record: frozen, unknown fields refused, versioned."""

    model_config = ConfigDict(frozen=True, extra="forbid")
    schema_version: int = 1

    def dump(self) -> dict[str, Any]:
        """JSON-safe data to store."""
        return self.model_dump(mode="json")

    @classmethod
    def load(cls, data: dict[str, Any]) -> Self:
        """Validate stored data (records from before versioning load as version 1)."""
        return cls.model_validate(data)


class SparseRecord(Record):
    """A record written piece by piece: only the fields a writer set are stored.

    A trial row stays without a score when the trial failed, and the job's result hash gets
    its fields from several writers (search, finalize, explanations), so a dump never blanks
    what another writer stored. ``schema_version`` is always written: a new record's is the
    current version, a loaded one keeps the version its data was written in.
    """

    def dump(self) -> dict[str, Any]:
        return {
            **self.model_dump(mode="json", exclude_unset=True),
            "schema_version": self.schema_version,
        }


class Part(BaseModel):
    """A piece inside a record (versioned with the record that holds it)."""

    model_config = ConfigDict(frozen=True, extra="forbid")


class ClassShare(Part):
    """One class of a classification target: the user's label, its rows and their share."""

    label: Any
    count: int = Field(ge=0)
    share: float = Field(ge=0.0, le=1.0)


class FeatureColumns(Part):
    """Feature columns by kind (workers read ``high_cardinality``)."""

    numeric: list[str] = []
    categorical: list[str] = []
    high_cardinality: list[str] = []


class TargetStats(Part):
    """Spread of a regression target (None where not finite)."""

    mean: float | None = None
    std: float | None = None
    min: float | None = None
    max: float | None = None


class TableSummary(Record):
    """What a job keeps about its table: written at submit, read by workers and the report."""

    rows: int = Field(ge=0)
    target: str
    task: str
    metric: str | None = None
    n_features: int = Field(ge=0)
    columns: FeatureColumns
    schema_: dict[str, str] = Field(default_factory=dict, alias="schema")
    missing_share: dict[str, float] = {}
    dropped: dict[str, str] = {}
    classes: list[Any] = []
    class_balance: list[ClassShare] | None = None
    base_rate: float | None = None
    target_stats: TargetStats | None = None
    warnings: list[str] = []

    model_config = ConfigDict(frozen=True, extra="forbid", populate_by_name=True)

    def dump(self) -> dict[str, Any]:
        return self.model_dump(mode="json", by_alias=True)


# ---------------------------------------------------------------------------- trial row


class TrialRow(SparseRecord):
    """One finished trial (complete, pruned or failed) as a worker stores it.

    Written by the shard (``workers/search.py``) and the reaper (``workers/leases.py``), read
    by the leaderboard, ``Job.trials()``, the report and finalize. ``score`` and
    ``fold_scores`` are greater-is-better; fields the trial never reached are left out.
    """

    number: int = Field(ge=0)
    state: Literal["complete", "pruned", "failed"]
    family: str
    params: dict[str, Any] = {}
    retry_of: int | None = None
    retries: int = Field(default=0, ge=0)
    reaped: bool = False
    shard: int | None = None
    worker: str | None = None
    arm: str | None = None
    started_at: float | None = None
    finished_at: float | None = None
    score: float | None = None
    score_std: float | None = 0.0
    fold_scores: list[float] = []
    rung_score: float | None = None
    members: str = ""
    size_bytes: int | None = None
    fit_seconds: float | None = 0.0
    predict_ms: float | None = 0.0
    fit_info: list[dict[str, int]] = []
    cost: float | None = None
    seconds: float | None = None
    ask_seconds: float | None = None
    trial_process_seconds: float | None = None
    tell_seconds: float | None = None
    journal_seconds: float | None = None
    note: str | None = None
    error: str | None = None

    def ranked_score(self) -> float:
        """The score of a row on the board; a row without one is a bug and is said loudly."""
        if self.score is None:
            raise ValueError(
                f"trial {self.number} ({self.state}) has no score: only complete, scored "
                "trials belong on the leaderboard"
            )
        return float(self.score)


# ---------------------------------------------------------------------------- library


class Combiner(Part):
    """How a library ensemble combines its members' predictions in the exported pipeline."""

    mode: Literal["average", "linear", "logistic"]
    weights: list[float] | None = None
    coef: list[float] | list[list[float]] | None = None
    intercept: float | list[float] | None = None


class LibraryRecord(Record):
    """One library ensemble over stored out-of-fold predictions (``workers/library.py``).

    Built in the trial process, stored under the job's result ``library`` (during the search
    by ``workers/composites.py``, finally by finalize), read by the leaderboard, finalize and
    the explanations. ``score`` is the nested (honest) score, greater-is-better.
    """

    id: str
    method: str
    members: list[int]
    weights: list[float] | None = None
    score: float
    score_std: float | None = 0.0
    fold_scores: list[float] = []
    in_sample_score: float | None = None
    combiner: Combiner | None = None
    during_search: bool = False
    trial_optimism: float = 0.0


# ---------------------------------------------------------------------------- final result


class Winner(Part):
    """The candidate behind the exported pipeline (``score`` greater-is-better)."""

    id: str
    kind: Literal["trial", "library"]
    family: str
    score: float


class Selection(Part):
    """BBC-CV of picking the best kept candidate, computed once per finalize.

    Greater-is-better; ``optimism`` is what the best trial's CV score overstates.
    """

    estimate: float
    ci_low: float
    ci_high: float
    winner_cv: float
    optimism: float
    n_boot: int = Field(ge=0)
    n_candidates: int = Field(ge=0)
    rows: int | None = None


class ParetoPoint(Part):
    """A trial on the score versus predict-latency plot (``score`` greater-is-better since
    version 2 of :class:`FinalResult`; version 1 stored it in the natural sign)."""

    candidate: str
    score: float
    predict_ms: float
    on_front: bool


class FinalResult(SparseRecord):
    """The job's result hash (the store's *extras*): what finalize commits and others add.

    Finalize writes the winner, the library, the selection estimate, the hold-out score and
    its timings; the first search slice adds ``leakage``, the search's library refreshes
    ``library``, the explanation task ``pareto``, ``explain`` and a late ``selection``. Each
    writer stores only the fields it sets.

    Version 2: every score is greater-is-better. Version 1 (results stored before
    2026-12-02, read without a ``schema_version``) kept ``holdout_score`` and the Pareto
    scores in the metric's natural sign; :meth:`natural_holdout` and :meth:`natural_pareto`
    give both versions in the natural sign, for the presentation edge.
    """

    schema_version: int = 2

    library: list[LibraryRecord] = []
    best: Winner | None = None
    trial_optimism: float = 0.0
    selection: Selection | None = None
    holdout_score: float | None = None
    finalize_seconds: float | None = None
    library_seconds: float | None = None
    refit_errors: list[str] = []
    passed_over_for_time: list[str] = []
    pareto: list[ParetoPoint] = []
    leakage: dict[str, Any] | None = None
    explain: dict[str, Any] | None = None

    @field_validator("selection", mode="before")
    @classmethod
    def _no_selection(cls, value: Any) -> Any:
        """``{}`` (stored when there was nothing to pick from) reads as no selection."""
        return None if value == {} else value

    @classmethod
    def load(cls, data: dict[str, Any]) -> Self:
        """Validate stored data; data without a ``schema_version`` is version 1."""
        return cls.model_validate({"schema_version": 1, **data})

    def _natural(self, metric: Metric | str, stored: float | None) -> float | None:
        return stored if self.schema_version < 2 else natural(metric, stored)

    def natural_holdout(self, metric: Metric | str) -> float | None:
        """The hold-out score in the metric's natural sign (for display)."""
        return self._natural(metric, self.holdout_score)

    def natural_pareto(self, metric: Metric | str) -> list[dict[str, Any]]:
        """The Pareto points with their scores in the metric's natural sign (for display)."""
        return [
            {**p.model_dump(mode="json"), "score": self._natural(metric, p.score)}
            for p in self.pareto
        ]


__all__ = [
    "ClassShare",
    "Combiner",
    "FeatureColumns",
    "FinalResult",
    "LibraryRecord",
    "ParetoPoint",
    "Part",
    "Record",
    "Selection",
    "SparseRecord",
    "TableSummary",
    "TargetStats",
    "TrialRow",
    "Winner",
]
