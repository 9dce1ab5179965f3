"""The demo's closing hint names files the demo wrote."""

from __future__ import annotations

import shlex
from pathlib import Path

import pandas as pd
from tuttiml.service.data import read_table
from tuttiml.service.demo import predict_hint, pump_stations, write_aside


def test_the_predict_hint_uses_the_stations_the_demo_kept_aside(tmp_path: Path) -> None:
    # invented demo data (pump_stations); the point is the files, not the numbers
    aside = pump_stations(n=50).drop(columns="failed_within_30d")
    model = tmp_path / "tutti-demo-model.skops"
    hint = predict_hint(model, write_aside(aside, model))
    command = shlex.split(hint.split("try: ", 1)[1])
    assert command[:3] == ["tutti", "predict", str(model)]
    rows = Path(command[3])
    assert rows.is_file() and rows.parent == model.parent
    pd.testing.assert_frame_equal(read_table(rows), aside, check_dtype=False)
