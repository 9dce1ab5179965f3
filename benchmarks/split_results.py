"""Per-split results of ``compare.py``, one JSON line each, so a comparison can be run over
several sittings (or machines) and merged.

A record holds one method's score on one outer split of one table, with the settings that
make scores comparable (outer splits, seed, budget, cores, matched wall, the hand loop's
trial count). Appending happens as soon as a split's method is scored, so an interrupted run
loses at most the fit in progress; a rerun with the same settings skips what is stored.
Reading several files merges them; records made with other settings are refused by name.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
from collections.abc import Iterable
from pathlib import Path
from typing import Any

#: Settings that must agree for scores of different sittings to be merged.
SETTINGS = ("splits", "seed", "seconds", "cores", "match_wall", "optuna_trials")


def settings_of(args: Any) -> dict[str, Any]:
    """The comparable settings of a run (its argparse namespace)."""
    return {name: getattr(args, name) for name in SETTINGS}


class SplitStore:
    """Records of one run's settings, read from ``paths`` and appended to ``paths[0]``.

    Raises:
        ValueError: a file holds records made with other settings (the message names the
            file, the setting and both values).
    """

    def __init__(self, paths: Iterable[Path], settings: dict[str, Any]) -> None:
        self.paths = list(paths)
        self.settings = settings
        self.records: dict[tuple[str, int, str], dict[str, Any]] = {}
        for path in self.paths:
            for rec in _read(path):
                self._check(rec, path)
                self.records[(rec["dataset"], int(rec["split"]), rec["method"])] = rec

    def _check(self, rec: dict[str, Any], path: Path) -> None:
        for name, value in self.settings.items():
            if rec.get(name) != value:
                raise ValueError(
                    f"{path}: a record of {rec.get('dataset')} split {rec.get('split')} has "
                    f"{name}={rec.get(name)!r}, this run {name}={value!r}; use the same "
                    f"settings to resume or merge, or another --results file."
                )

    def get(self, dataset: str, split: int, method: str) -> dict[str, Any] | None:
        return self.records.get((dataset, split, method))

    def add(self, **fields: Any) -> dict[str, Any]:
        """Store one scored split now (appended and flushed)."""
        rec = {
            **fields,
            **self.settings,
            "at": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        }
        self.records[(rec["dataset"], int(rec["split"]), rec["method"])] = rec
        if self.paths:
            self.paths[0].parent.mkdir(parents=True, exist_ok=True)
            with self.paths[0].open("a") as sink:
                sink.write(json.dumps(rec) + "\n")
        return rec

    def datasets(self) -> list[str]:
        """Datasets with at least one record, in first-seen order."""
        return list(dict.fromkeys(k[0] for k in self.records))

    def series(self, dataset: str, method: str, field: str) -> dict[int, float]:
        """``field`` (score or wall) per split id of one method on one dataset."""
        return {
            split: float("nan") if rec[field] is None else float(rec[field])
            for (d, split, m), rec in self.records.items()
            if d == dataset and m == method
        }


def _read(path: Path) -> list[dict[str, Any]]:
    """Records of a JSON-lines file (missing file: none; a torn last line is skipped)."""
    if not path.exists():
        return []
    out = []
    for line in path.read_text().splitlines():
        with contextlib.suppress(ValueError):
            out.append(json.loads(line))
    return out
