"""SearchSpec: what to search, on which column, for how long; validated with clear messages."""

from __future__ import annotations

import enum
from datetime import datetime
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)
from tuttiml.service.errors import InvalidSpecError

SCHEMA_VERSION = 1

#: Ensemble families the workers know (kept here because service/ never imports workers/;
#: ``tests/unit/test_layers.py`` checks it against the worker registry).
KNOWN_FAMILIES: tuple[str, ...] = (
    "bagging",
    "blending",
    "boosting",
    "single",
    "stacking",
    "voting",
)


class Task(enum.StrEnum):
    """Prediction task; ``auto`` is resolved from the target column at submit time."""

    AUTO = "auto"
    BINARY = "binary"
    MULTICLASS = "multiclass"
    REGRESSION = "regression"


class Metric(enum.StrEnum):
    """Metrics tutti scores with (each mapped to a scikit-learn function in the workers)."""

    ROC_AUC = "roc_auc"
    LOG_LOSS = "log_loss"
    ACCURACY = "accuracy"
    BALANCED_ACCURACY = "balanced_accuracy"
    F1 = "f1"
    F1_MACRO = "f1_macro"
    RMSE = "rmse"
    MAE = "mae"
    R2 = "r2"


#: Which metrics make sense for which task, the first being the default.
METRICS_BY_TASK: dict[Task, tuple[Metric, ...]] = {
    Task.BINARY: (
        Metric.ROC_AUC,
        Metric.LOG_LOSS,
        Metric.ACCURACY,
        Metric.BALANCED_ACCURACY,
        Metric.F1,
    ),
    Task.MULTICLASS: (Metric.LOG_LOSS, Metric.ACCURACY, Metric.BALANCED_ACCURACY, Metric.F1_MACRO),
    Task.REGRESSION: (Metric.RMSE, Metric.MAE, Metric.R2),
}

#: Metrics where a smaller value is better (shown in natural sign, negated internally).
LOWER_IS_BETTER: frozenset[Metric] = frozenset({Metric.LOG_LOSS, Metric.RMSE, Metric.MAE})


def score_sign(metric: Metric | str) -> float:
    """+1 when greater is better, -1 when smaller is better.

    Every score tutti stores is greater-is-better (an RMSE of 3.2 is stored as -3.2), so
    sorting and comparing never branch on the metric; :func:`natural` turns a stored score
    back into the metric's own sign, at the presentation edge only.
    """
    return -1.0 if Metric(metric) in LOWER_IS_BETTER else 1.0


def natural(metric: Metric | str, stored: float | None) -> float | None:
    """A stored (greater-is-better) score in the metric's natural sign; ``None`` stays ``None``."""
    return None if stored is None else score_sign(metric) * float(stored)


def default_metric(task: Task) -> Metric:
    """The metric used when the spec names none."""
    return METRICS_BY_TASK[task][0]


class SearchSpec(BaseModel):
    """Everything a search job needs besides the table itself.

    Budgets: the search stops at ``max_trials`` complete-or-pruned trials or after
    ``wall_seconds`` (counted from the moment the first worker starts it) or at ``deadline``,
    whichever comes first; finalize (refit and commit of the best pipeline) fits inside that
    time. The explanations run afterwards, for ``explain_seconds`` of their own (default: a
    quarter of the search time within the workers' bounds; 0 runs none of the parts that fit
    models).
    """

    model_config = ConfigDict(
        frozen=True, extra="forbid", use_enum_values=False, allow_inf_nan=False
    )

    @model_validator(mode="before")
    @classmethod
    def _no_bools_for_numbers(cls, data: Any) -> Any:
        if isinstance(data, dict):
            for name in (
                "folds",
                "max_trials",
                "max_failed_trials",
                "memory_limit_mb",
                "seed",
                "parallelism",
                "library_size",
                "halving_rows",
                "wall_seconds",
                "trial_timeout",
                "holdout",
                "explain_seconds",
            ):
                if isinstance(data.get(name), bool):
                    raise ValueError(f"{name}: expected a number, got {data[name]!r}")
        return data

    schema_version: int = Field(
        default=SCHEMA_VERSION, description="Version of this spec's layout (set by tutti)."
    )
    target: str = Field(min_length=1, description="Column to predict.")
    task: Task = Field(
        default=Task.AUTO, description="Prediction task; auto decides from the target column."
    )
    metric: Metric | None = Field(
        default=None,
        description="Score to rank candidates by (default per task: see METRICS_BY_TASK).",
    )
    folds: int = Field(default=5, ge=2, le=20, description="Number of cross-validation folds.")
    group_column: str | None = Field(
        default=None, description="Column whose groups never straddle two folds."
    )
    order_column: str | None = Field(
        default=None, description="Column giving time order: folds train on the past only."
    )
    holdout: float = Field(
        default=0.0,
        ge=0.0,
        le=0.5,
        description="Share of rows kept aside, scored once at the end.",
    )
    max_trials: int = Field(
        default=50, ge=1, le=1_000_000, description="Most trials to run (complete or pruned)."
    )
    wall_seconds: float | None = Field(
        default=3600.0,
        gt=0,
        le=30 * 24 * 3600,
        description="Wall-clock budget in seconds from the first worker's start.",
    )
    deadline: datetime | None = Field(
        default=None, description="Absolute time by which the model is due (ISO 8601)."
    )
    trial_timeout: float = Field(
        default=600.0, gt=0, le=24 * 3600, description="Seconds after which a trial is killed."
    )
    explain_seconds: float | None = Field(
        default=None,
        ge=0,
        le=24 * 3600,
        description=(
            "Time the explanations get after the model is committed (None: a quarter of the "
            "search time within the workers' TUTTI_EXPLAIN_MIN/MAX_SECONDS); 0: none that fit "
            "models."
        ),
    )
    max_failed_trials: int | None = Field(
        default=None,
        ge=1,
        description="Failed trials that end the search (None: max(10, max_trials // 2)).",
    )
    memory_limit_mb: int | None = Field(
        default=None, ge=64, description="Memory cap of one trial in MB (None: no cap)."
    )
    families: tuple[str, ...] | None = Field(
        default=None, description="Ensemble families to search (None: all)."
    )
    seed: int = Field(
        default=0, ge=0, le=2**31 - 1, description="Seed of the folds, samplers and models."
    )
    parallelism: int = Field(
        default=2, ge=1, le=256, description="Search shards (about the worker processes to use)."
    )
    library_size: int = Field(
        default=5,
        ge=0,
        le=100,
        description="Candidates per family whose out-of-fold predictions feed library ensembles.",
    )
    halving_rows: int | None = Field(
        default=100_000,
        ge=100,
        description=(
            "From this many search rows on, each trial first fits on a subsample of fold 0's "
            "training rows and only candidates the pruner passes go on to all rows; "
            "None turns it off."
        ),
    )
    priority: Literal["normal", "high"] = Field(
        default="normal", description="high puts the job ahead of jobs already queued."
    )
    drop_columns: tuple[str, ...] = Field(
        default=(), description="Columns to leave out of the features."
    )
    allow_leaks: bool = Field(
        default=False,
        description="Warn about, instead of refusing, columns that give the target away.",
    )
    name: str | None = Field(default=None, max_length=200, description="A label for the job.")

    @field_validator("families")
    @classmethod
    def _known_families(cls, value: tuple[str, ...] | None) -> tuple[str, ...] | None:
        if value is None:
            return None
        if len(value) == 0:
            raise ValueError("is empty; leave it out to search every family")
        bad = [f"[{i}] {name!r}" for i, name in enumerate(value) if name not in KNOWN_FAMILIES]
        if bad:
            raise ValueError(
                f"unknown family {', '.join(bad)}; choose from {', '.join(KNOWN_FAMILIES)}"
            )
        return tuple(dict.fromkeys(value))

    @model_validator(mode="after")
    def _consistent(self) -> SearchSpec:
        if self.metric is not None and self.task is not Task.AUTO:
            allowed = METRICS_BY_TASK[self.task]
            if self.metric not in allowed:
                raise ValueError(
                    f"metric {self.metric.value!r} does not fit task {self.task.value!r}; "
                    f"choose one of {', '.join(m.value for m in allowed)}"
                )
        if self.wall_seconds is None and self.deadline is None and self.max_trials > 100_000:
            raise ValueError("set wall_seconds or deadline when max_trials exceeds 100000")
        named = [c for c in (self.group_column, self.order_column) if c]
        if self.target in named or self.target in self.drop_columns:
            raise ValueError(f"target {self.target!r} is also named as group/order/drop column")
        if self.group_column and self.order_column:
            raise ValueError("give group_column or order_column, not both")
        return self

    @property
    def family_names(self) -> tuple[str, ...]:
        """The families to search (all known ones when the spec names none)."""
        return self.families or KNOWN_FAMILIES

    @property
    def failure_cap(self) -> int:
        """How many failed trials end the search (``max_failed_trials`` or a sensible default)."""
        if self.max_failed_trials is not None:
            return self.max_failed_trials
        return max(10, self.max_trials // 2)

    def check_deadline(self) -> None:
        """Refuse a deadline that has already passed (checked at submit and extend only)."""
        if self.deadline is None:
            return
        import datetime as _dt

        when = self.deadline
        if when.tzinfo is None:
            when = when.astimezone()
        if when <= _dt.datetime.now(_dt.UTC):
            raise InvalidSpecError(
                f"deadline: {self.deadline.isoformat()} has already passed; give a future time "
                "or use wall_seconds.",
                field="deadline",
                value=self.deadline.isoformat(),
            )

    def resolved(self, task: Task) -> SearchSpec:
        """Copy with the task and metric fixed (called once the target column is known)."""
        metric = self.metric or default_metric(task)
        if metric not in METRICS_BY_TASK[task]:
            raise InvalidSpecError(
                f"metric: {metric.value!r} does not fit the {task.value} target "
                f"{self.target!r}; choose one of "
                f"{', '.join(m.value for m in METRICS_BY_TASK[task])}.",
                field="metric",
                value=metric.value,
            )
        return self.model_copy(update={"task": task, "metric": metric})

    def to_json(self) -> str:
        return self.model_dump_json()

    @classmethod
    def from_json(cls, text: str | bytes) -> SearchSpec:
        return parse_spec(text)


def _location(loc: tuple[Any, ...]) -> str:
    out = ""
    for part in loc:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "spec"


#: Spec fields a user sets (``schema_version`` is written by tutti itself).
USER_FIELDS: tuple[str, ...] = tuple(f for f in SearchSpec.model_fields if f != "schema_version")

#: Fields that hold a list of names.
LIST_FIELDS: frozenset[str] = frozenset({"families", "drop_columns"})


def suggest_field(name: str) -> str | None:
    """The spec field ``name`` most likely means (a typo, a dash or a missing letter), if any."""
    import difflib

    key = name.strip().replace("-", "_").lower()
    if key in USER_FIELDS:
        return key
    close = difflib.get_close_matches(key, USER_FIELDS, n=1, cutoff=0.7)
    return close[0] if close else None


def _fix_hint(err: dict[str, Any]) -> str:
    kind = err.get("type", "")
    loc = tuple(err.get("loc", ()))
    if kind == "extra_forbidden":
        guess = suggest_field(str(loc[-1])) if loc else None
        if guess:
            return f"did you mean {guess}?"
        return f"remove it; known fields are {', '.join(USER_FIELDS)}"
    if kind == "missing":
        return "give a value"
    if kind in ("tuple_type", "list_type"):
        example = "['boosting', 'bagging']" if loc and loc[0] == "families" else "['id', 'notes']"
        return f"pass a list, e.g. {example}"
    return ""


def parse_spec(data: Any = None, /, **fields: Any) -> SearchSpec:
    """Validate a spec from a dict, JSON text or keyword fields.

    Raises:
        InvalidSpecError: listing every problem (field, rule, value received, what to do).
    """
    try:
        if isinstance(data, SearchSpec):
            return (
                data if not fields else SearchSpec.model_validate({**data.model_dump(), **fields})
            )
        if isinstance(data, (str, bytes)):
            return SearchSpec.model_validate_json(data)
        if data is not None and not isinstance(data, dict):
            raise InvalidSpecError(
                f"spec: expected a mapping of field names to values, got {type(data).__name__}; "
                "pass a dict, JSON text or a SearchSpec",
                field="spec",
                value=data,
            )
        return SearchSpec.model_validate({**(data or {}), **fields})
    except ValidationError as exc:
        problems = []
        for err in exc.errors():
            where = _location(tuple(err.get("loc", ())))
            msg = err.get("msg", "invalid").removeprefix("Value error, ")
            if err.get("type") == "extra_forbidden":
                msg = "not a spec field"
            value = err.get("input")
            shown = (
                "" if err.get("type") == "missing" or not err.get("loc") else f" (got {value!r})"
            )
            hint = _fix_hint(err)
            problems.append(f"{where}: {msg}{shown}" + (f"; {hint}" if hint else ""))
        first = exc.errors()[0] if exc.errors() else {}
        field = _location(tuple(first.get("loc", ()))) if first else None
        raise InvalidSpecError(
            "invalid search spec:\n  " + "\n  ".join(problems),
            field=field,
            value=first.get("input"),
            problems=problems,
        ) from None
