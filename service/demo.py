"""``tutti demo``: a search on generated data from a scenario of our own, end to end.

Scenario: a regional water utility keeps a table of its pumping stations and wants to know
which pumps will fail within 30 days, so crews can service them first. The table is invented
by :func:`pump_stations`: mixed numeric and categorical columns, missing values, a rare
positive class and non-linear effects (an interaction of vibration and bearing temperature,
an age threshold, a regional effect, a many-level contractor column).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd


def pump_stations(n: int = 4000, seed: int = 7) -> pd.DataFrame:
    """Generate the demo table (deterministic for a seed)."""
    rng = np.random.default_rng(seed)
    regions = np.array(["north", "south", "east", "west", "delta", "upland"])
    makers = np.array([f"maker_{c}" for c in "ABCDEFGHIJKL"])
    contractors = np.array([f"crew_{i:02d}" for i in range(60)])
    region = rng.choice(regions, n, p=[0.22, 0.2, 0.18, 0.18, 0.12, 0.10])
    maker = rng.choice(makers, n)
    age = rng.gamma(3.0, 3.5, n)
    hours = np.clip(rng.normal(14, 5, n), 0, 24)
    vibration = rng.lognormal(0.0, 0.45, n)
    temp = rng.normal(58, 9, n) + 0.6 * hours
    service_gap = rng.exponential(160, n)
    hardness = rng.choice(["soft", "medium", "hard"], n, p=[0.3, 0.45, 0.25])
    flow = rng.normal(120, 30, n)
    pressure_drop = np.abs(rng.normal(0.8, 0.35, n)) + 0.02 * age
    contractor = rng.choice(contractors, n)
    crew_effect = dict(zip(contractors, rng.normal(0, 0.5, len(contractors)), strict=True))
    region_effect = {
        "north": -0.3,
        "south": 0.2,
        "east": 0.0,
        "west": -0.1,
        "delta": 0.7,
        "upland": 0.3,
    }
    logit = (
        -3.4
        + 1.6 * np.maximum(vibration - 1.2, 0) * (temp > 70)
        + 0.9 * (age > 14)
        + 0.004 * np.minimum(service_gap, 500)
        + 0.5 * (hardness == "hard")
        + np.vectorize(region_effect.get)(region)
        + np.vectorize(crew_effect.get)(contractor)
        + 0.8 * np.sin(flow / 25.0)
        + 0.6 * (pressure_drop > 1.3)
    )
    failed = rng.random(n) < 1 / (1 + np.exp(-logit))
    frame = pd.DataFrame(
        {
            "station_region": region,
            "pump_maker": maker,
            "pump_age_years": age.round(1),
            "daily_run_hours": hours.round(1),
            "vibration_rms": vibration.round(3),
            "bearing_temp_c": temp.round(1),
            "days_since_service": service_gap.round(0),
            "water_hardness": hardness,
            "flow_m3h": flow.round(1),
            "pressure_drop_bar": pressure_drop.round(2),
            "installed_by": contractor,
            "failed_within_30d": failed.astype(int),
        }
    )
    for col, share in (
        ("vibration_rms", 0.08),
        ("days_since_service", 0.12),
        ("pump_maker", 0.05),
        ("bearing_temp_c", 0.04),
    ):
        frame.loc[rng.random(n) < share, col] = None
    frame["pump_maker"] = frame["pump_maker"].astype("string")  # nullable dtype, pd.NA inside
    frame["days_since_service"] = frame["days_since_service"].astype("Int64")
    return frame


def write_aside(rows: pd.DataFrame, model_path: Path) -> Path:
    """Write the stations kept aside (no target) as a CSV beside the model, for the hint."""
    path = model_path.with_name(model_path.stem + "-stations.csv")
    rows.to_csv(path, index=False)
    return path


def predict_hint(model_path: Path, rows_path: Path) -> str:
    """The closing line: a ``tutti predict`` command on files the demo wrote."""
    return (
        f"exported to {model_path}; the {rows_path} stations were kept aside; try: "
        f"tutti predict {model_path} {rows_path} -o predictions.csv"
    )


def run_demo(
    *,
    max_trials: int = 40,
    wall_seconds: float = 120.0,
    processes: int = 2,
    redis_url: str | None = None,
    prefix: str | None = None,
    out: Path = Path("tutti-demo-model.skops"),
    show_board: Callable[..., None] = print,
) -> int:
    """Generate data, start local workers, search, print the board, export and score."""
    from sklearn.metrics import roc_auc_score
    from tuttiml.service.client import Client

    frame = pump_stations()
    rng = np.random.default_rng(1)
    test_mask = rng.random(len(frame)) < 0.2
    train, test = frame[~test_mask].reset_index(drop=True), frame[test_mask].reset_index(drop=True)
    print(
        f"demo: {len(train)} pump stations to search on, {len(test)} kept aside; "
        f"{train['failed_within_30d'].mean():.1%} failed within 30 days"
    )
    client = Client(url=redis_url, prefix=prefix)
    print(f"store: {client.url}")
    workers = client.start_workers(processes, exit_when_empty=True)
    try:
        t0 = time.time()
        job = client.submit(
            train,
            target="failed_within_30d",
            max_trials=max_trials,
            wall_seconds=wall_seconds,
            parallelism=processes,
            seed=0,
            trial_timeout=max(60.0, wall_seconds / 2),
            name="pump failures demo",
        )
        print(
            f"job {job.id}: {max_trials} trials or {wall_seconds:.0f} s, "
            f"{processes} worker processes"
        )
        job.wait(progress=True, stream=sys.stdout)
        st = job.status()
        print(
            f"finished in {time.time() - t0:.0f} s: {st['state']} "
            f"({st['complete']} complete, {st['pruned']} pruned, {st['failed']} failed)"
        )
        if st["state"] != "finished":
            print(f"reason: {st.get('reason')}")
            return 1
        show_board(job.leaderboard(), limit=12)
        path = job.export(out)
        model = job.best_pipeline()
        auc = roc_auc_score(
            test["failed_within_30d"],
            model.predict_proba(test.drop(columns="failed_within_30d"))[:, 1],
        )
        meta = job.artifact_meta()
        print(
            f"best: {meta['candidate']} ({meta['family']}), cross-validated roc_auc "
            f"{meta['cv_score']:.4f}; on the {len(test)} stations kept aside: {auc:.4f}"
        )
        print(predict_hint(path, write_aside(test.drop(columns="failed_within_30d"), path)))
        print(
            "Cross-validated scores are estimates. Before acting on a model's output, check "
            "for leakage and unfairness and follow local rules and qualified review."
        )
        return 0
    finally:
        workers.wait(timeout=60) if workers.poll() is None else None
        if workers.poll() is None:
            workers.terminate()
        _still_running(client)


def _still_running(client: Any) -> None:
    """The demo's last lines: what it leaves running in the background, and how to stop it."""
    if client.settings.redis_url:
        print(f"still running: nothing started by the demo (the store is {client.url}).")
        return
    from tuttiml.service.server import EmbeddedServer

    st = EmbeddedServer(client.settings.home).status()
    if not st["running"]:
        return
    print(
        f"still running: the embedded Redis server (pid {st['pid']}, data in {st['home']}), "
        "which keeps the demo's job for `tutti status`, `tutti report` and friends."
    )
    print("stop it with: tutti server stop   (jobs are kept; any tutti command starts it again)")
