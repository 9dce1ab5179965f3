"""``tutti submit``'s spec options: one flag per ``SearchSpec`` field, built from the model.

Each field's flag, type, allowed values, default and help come from the field itself (its
annotation, ``description`` and default), so a new spec field gets its flag and its help
without touching the command line code, and ``tests/unit/test_cli.py`` checks that no field
is left without one. ``--spec FILE.json`` reads fields from a file and ``--set FIELD=VALUE``
sets any field; flags win over ``--set``, which wins over the file.
"""

from __future__ import annotations

import argparse
import enum
import json
import types
import typing
from datetime import datetime
from pathlib import Path
from typing import Any, Literal

from tuttiml.service.errors import InvalidSpecError
from tuttiml.service.spec import (
    KNOWN_FAMILIES,
    LIST_FIELDS,
    USER_FIELDS,
    SearchSpec,
    suggest_field,
)

#: Metavariables shown in help for fields whose type alone says too little.
_METAVARS = {
    "target": "COLUMN",
    "group_column": "COLUMN",
    "order_column": "COLUMN",
    "drop_columns": "COLUMN[,COLUMN…]",
    "families": "FAMILY[,FAMILY…]",
    "wall_seconds": "SECONDS",
    "trial_timeout": "SECONDS",
    "explain_seconds": "SECONDS",
    "deadline": "TIME",
    "holdout": "SHARE",
    "memory_limit_mb": "MB",
    "halving_rows": "ROWS",
    "name": "TEXT",
}

#: Words that turn an optional number off (``--halving-rows off``).
_NONE_WORDS = ("none", "off")


class _Off:
    """What such a flag parses to (argparse's own default, None, means "not given")."""

    def __repr__(self) -> str:
        return "off"


OFF = _Off()


def flag(field: str) -> str:
    """``max_trials`` -> ``--max-trials``."""
    return "--" + field.replace("_", "-")


def _inner(annotation: Any) -> tuple[Any, bool]:
    """The type inside ``X | None`` and whether None is allowed."""
    args = typing.get_args(annotation)
    if typing.get_origin(annotation) in (typing.Union, types.UnionType) and type(None) in args:
        rest = [a for a in args if a is not type(None)]
        return rest[0], True
    return annotation, False


def _choices(kind: Any) -> list[str] | None:
    if isinstance(kind, type) and issubclass(kind, enum.Enum):
        return [str(m.value) for m in kind]
    if typing.get_origin(kind) is Literal:
        return [str(a) for a in typing.get_args(kind)]
    return None


def _number(kind: type, field: str, optional: bool) -> Any:
    def parse(text: str) -> Any:
        if optional and text.strip().lower() in _NONE_WORDS:
            return OFF
        try:
            return kind(text)
        except ValueError:
            word = "a whole number" if kind is int else "a number"
            off = " or 'off'" if optional else ""
            raise argparse.ArgumentTypeError(f"expected {word}{off}, got {text!r}") from None

    parse.__name__ = f"{field} value"
    return parse


def _names(text: str) -> tuple[str, ...]:
    return tuple(part.strip() for part in text.split(",") if part.strip())


#: Defaults that a plain value cannot say.
_DEFAULTS = {
    "metric": "per task: binary roc_auc, multiclass log_loss, regression rmse",
    "families": "all",
    "max_failed_trials": "max(10, max_trials // 2)",
    "memory_limit_mb": "no cap",
    "explain_seconds": "a quarter of the search time, within the workers' bounds",
    "group_column": "none",
    "order_column": "none",
}


def _default_text(field: str) -> str:
    info = SearchSpec.model_fields[field]
    if info.is_required():
        return "required"
    value = info.default
    if field in _DEFAULTS:
        return _DEFAULTS[field]
    if value is None or value == ():
        return "none"
    if isinstance(value, enum.Enum):
        return str(value.value)
    if isinstance(value, bool):
        return "off"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _help(field: str, choices: list[str] | None, optional_number: bool) -> str:
    info = SearchSpec.model_fields[field]
    text = (info.description or field).split(" (None")[0].rstrip(".")
    text = text.removesuffix("; None turns it off").replace(
        " (default per task: see METRICS_BY_TASK)", ""
    )
    text = text[0].lower() + text[1:]
    if choices:
        text += f"; one of {', '.join(choices)}"
    if field == "families":
        text += f"; comma-separated, from {', '.join(KNOWN_FAMILIES)}"
    if field == "drop_columns":
        text += "; comma-separated"
    if optional_number:
        text += "; 'off' for none"
    if field == "deadline":
        text += ", e.g. 2026-12-31T18:00:00+00:00"
    default = _default_text(field)
    return f"{text} ({default})" if default == "required" else f"{text} (default: {default})"


def add_spec_options(parser: argparse.ArgumentParser) -> None:
    """Add one flag per spec field (and ``--spec``, ``--set``) to ``submit``'s parser."""
    group = parser.add_argument_group(
        "search spec", "Each flag sets the spec field of the same name (README: The search spec)."
    )
    group.add_argument(
        "--spec",
        metavar="FILE.json",
        help="read spec fields from a JSON object in FILE.json; flags override it (default: none)",
    )
    for field in USER_FIELDS:
        kind, optional = _inner(SearchSpec.model_fields[field].annotation)
        choices = _choices(kind)
        kwargs: dict[str, Any] = {"dest": f"spec_{field}", "default": None}
        if kind is bool:
            kwargs["action"] = "store_const"
            kwargs["const"] = True
        elif field in LIST_FIELDS:
            kwargs["type"] = _names
        elif kind in (int, float):
            kwargs["type"] = _number(kind, field, optional)
        elif choices:
            kwargs["choices"] = choices
            kwargs["metavar"] = field.upper()
        elif kind in (str, datetime):
            kwargs["type"] = str
        if "action" not in kwargs and "metavar" not in kwargs:
            kwargs["metavar"] = _METAVARS.get(field, "N" if kind in (int, float) else "TEXT")
        number = kind in (int, float) and optional
        group.add_argument(flag(field), help=_help(field, choices, number), **kwargs)
    group.add_argument(
        "--set",
        action="append",
        metavar="FIELD=VALUE",
        help="set a spec field by name (VALUE as JSON, or plain text); repeatable; every field "
        "also has its own flag above (default: none)",
    )


def _from_file(path: str) -> dict[str, Any]:
    try:
        loaded = json.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as exc:
        raise InvalidSpecError(
            f"--spec {path}: cannot read it ({exc.strerror}); give the path of a JSON file.",
            field="spec",
            value=path,
        ) from None
    except ValueError as exc:
        raise InvalidSpecError(
            f"--spec {path}: not valid JSON ({exc}); write one object of spec fields, "
            'e.g. {"target": "churned", "max_trials": 40}.',
            field="spec",
            value=path,
        ) from None
    if not isinstance(loaded, dict):
        raise InvalidSpecError(
            f"--spec {path}: expected a JSON object of spec fields, got {type(loaded).__name__}.",
            field="spec",
            value=path,
        )
    loaded.pop("schema_version", None)
    return loaded


def _from_set(items: list[str]) -> dict[str, Any]:
    fields: dict[str, Any] = {}
    for item in items:
        key, eq, value = item.partition("=")
        key = key.strip()
        if not eq or not key:
            raise InvalidSpecError(
                f"--set {item!r}: use FIELD=VALUE, e.g. --set library_size=8",
                field="set",
                value=item,
            )
        if key not in USER_FIELDS:
            guess = suggest_field(key)
            hint = (
                f"did you mean {guess} ({flag(guess)})?"
                if guess
                else (f"known fields are {', '.join(USER_FIELDS)}.")
            )
            raise InvalidSpecError(
                f"--set {item!r}: {key!r} is not a spec field; {hint}", field="set", value=item
            )
        try:
            parsed = json.loads(value)
        except ValueError:
            parsed = value
        if key in LIST_FIELDS and isinstance(parsed, str):
            parsed = list(_names(parsed))
        fields[key] = parsed
    return fields


def spec_fields(args: argparse.Namespace) -> dict[str, Any]:
    """The spec fields given on the command line: file, then ``--set``, then flags."""
    fields = _from_file(args.spec) if args.spec else {}
    fields.update(_from_set(args.set or []))
    for field in USER_FIELDS:
        value = getattr(args, f"spec_{field}")
        if value is OFF:
            fields[field] = None
        elif value is not None:
            fields[field] = list(value) if field in LIST_FIELDS else value
    if "target" not in fields:
        raise InvalidSpecError(
            'target: no target column given; add --target COLUMN (or "target" in the '
            "--spec file).",
            field="target",
            value=None,
        )
    return fields
