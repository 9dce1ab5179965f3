"""Typed, versioned records: what crosses a process or time boundary, defined once.

A record is written by one side (a client, a worker, a later version of tutti) and read back
by another, so each is a frozen pydantic model with a ``schema_version``: the writer dumps it
to JSON-safe data with :meth:`Record.dump`, the reader validates it with
:meth:`Record.load`, and a record stored by an older version (without the field) still loads.
Scores inside records are greater-is-better; :func:`tuttiml.service.spec.natural` converts
them at the presentation edge only.
"""

from __future__ import annotations

from typing import Any, ClassVar, Self

from pydantic import BaseModel, ConfigDict, Field


class Record(BaseModel):
    """Base of every stored record: frozen, unknown fields refused, versioned."""

    model_config = ConfigDict(frozen=True, extra="forbid")
    VERSION: ClassVar[int] = 1
    schema_version: int = 1

    def dump(self) -> dict[str, Any]:
        """JSON-safe data to store."""
        return self.model_dump(mode="json")

    @classmethod
    def load(cls, data: dict[str, Any]) -> Self:
        """Validate stored data (records from before versioning load as version 1)."""
        return cls.model_validate(data)


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


__all__ = ["ClassShare", "FeatureColumns", "Part", "Record", "TableSummary", "TargetStats"]
