"""What each ``tutti`` command does once its arguments are parsed (``service.cli`` parses).

Every function takes the parsed ``argparse.Namespace`` and returns the exit code: 0 done,
1 the command ran but the outcome is not what was asked for (a job that ended failed or
cancelled, a declined confirmation), 2 bad input (printed by ``cli.main``).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any

from tuttiml.service.errors import EnsembleSearchError
from tuttiml.service.terminal import (
    STATUS_HEADER,
    confirm,
    print_board,
    print_json,
    print_pairs,
    print_table,
    status_row,
    upload_bar,
)


def _client(args: argparse.Namespace) -> Any:
    from tuttiml.service.client import Client

    try:
        return Client(url=args.redis_url, prefix=args.prefix)
    except ValueError as exc:  # redis-py's word on a malformed URL
        if "URL" not in str(exc):
            raise
        raise EnsembleSearchError(
            f"--redis-url {args.redis_url!r}: {exc}; e.g. redis://127.0.0.1:6379/0",
            field="redis_url",
            value=args.redis_url,
        ) from None


def _follow(job: Any, timeout: float | None = None, *, explanations: bool = False) -> int:
    """Draw the job's progress until it is final, then print its board; 1 unless finished.

    A failed or cancelled job exits 1 so scripts see it (its board, if any, still prints).
    """
    try:
        st = job.wait(progress=True, timeout=timeout, explanations=explanations)
    except TimeoutError as exc:
        print(f"tutti wait: {exc}; it goes on (tutti wait {job.id} to follow it again)")
        return 1
    board = job.leaderboard()
    if len(board):
        print_board(board, limit=10)
    if st["state"] == "finished":
        print(f"next: tutti export {job.id} -o model.skops · tutti report {job.id} -o report.html")
        return 0
    reason = st.get("reason") or st.get("stop_reason") or "no reason recorded"
    print(
        f"tutti: job {job.id} ended {st['state']}: {reason}; see `tutti logs {job.id}`",
        file=sys.stderr,
    )
    return 1


def cmd_submit(args: argparse.Namespace) -> int:
    from tuttiml.service.spec_options import spec_fields

    fields = spec_fields(args)
    client = _client(args)
    job = client.submit(args.data, **fields, upload_progress=upload_bar(sys.stderr))
    print(job.id)
    if args.wait:
        return _follow(job)
    print(f"follow it: tutti wait {job.id}   (workers: tutti start-workers)", file=sys.stderr)
    return 0


def cmd_wait(args: argparse.Namespace) -> int:
    job = _client(args).job(args.job)
    return _follow(job, timeout=args.timeout, explanations=args.explanations)


def cmd_status(args: argparse.Namespace) -> int:
    client = _client(args)
    jobs = [client.job(args.job)] if args.job else client.jobs()
    statuses = [j.status() for j in jobs]
    if args.json:
        print_json(statuses)
        return 0
    if not statuses:
        print("no jobs yet: submit one with `tutti submit data.csv --target COLUMN`")
        return 0
    print_table([status_row(st) for st in statuses], STATUS_HEADER)
    if len(statuses) == 1:  # one job: each explanation part and whether it ran
        for part, state in statuses[0]["explain_parts"].items():
            print(f"  {part}: {state}")
    return 0


def cmd_leaderboard(args: argparse.Namespace) -> int:
    board = _client(args).job(args.job).leaderboard()
    if args.json:
        import json

        print_json(
            {
                "job": args.job,
                "metric": board.attrs.get("metric"),
                "greater_is_better": board.attrs.get("greater_is_better"),
                "direction": board.attrs.get("direction"),
                "rows": json.loads(board.to_json(orient="records")),
            }
        )
    else:
        print_board(board, limit=args.limit or None)
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    path = _client(args).job(args.job).report(args.output)
    print(f"wrote {path}")
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    job = _client(args).job(args.job)
    path = job.export(args.output, max_predict_ms=args.max_predict_ms)
    meta = job.artifact_meta() if args.max_predict_ms is None else {}
    what = f": {meta['candidate']} ({meta['family']})" if meta.get("candidate") else ""
    print(f"wrote {path} (+ {path.name}.json){what}")
    return 0


def _keep_columns(frame: Any, names: list[str]) -> list[str]:
    keep = [c.strip() for item in names for c in item.split(",") if c.strip()]
    missing = [c for c in keep if c not in frame.columns]
    if missing:
        raise EnsembleSearchError(
            f"--keep: {', '.join(map(repr, missing))} not in the table; columns are "
            f"{', '.join(map(str, frame.columns[:30]))}."
        )
    return keep


def cmd_predict(args: argparse.Namespace) -> int:
    import numpy as np
    import pandas as pd
    from tuttiml.service.artifacts import read_export
    from tuttiml.service.config import Settings
    from tuttiml.service.data import read_table

    frame = read_table(args.data)
    keep = _keep_columns(frame, args.keep or [])  # before the (slow) model load
    model, meta = read_export(Path(args.model), key=Settings.from_env().artifact_key)
    out = frame[keep].reset_index(drop=True).copy()
    out["prediction"] = model.predict(frame)
    if hasattr(model, "predict_proba") and meta.get("task") != "regression":
        proba = np.asarray(model.predict_proba(frame))
        for j, c in enumerate(model.classes_):
            out[f"proba_{c}"] = proba[:, j]
    if not args.output:
        out.to_csv(sys.stdout, index=False)
        return 0
    target = Path(args.output)
    if target.suffix.lower() in (".parquet", ".pq"):
        pd.DataFrame(out).to_parquet(target, index=False)
        kind = "Parquet"
    else:
        out.to_csv(target, index=False)
        kind = "CSV"
    print(f"wrote {len(out)} predictions to {target} ({kind}; columns: {', '.join(out.columns)})")
    return 0


def cmd_cancel(args: argparse.Namespace) -> int:
    changed = _client(args).job(args.job).cancel()
    if changed:
        print(f"{args.job}: cancelled; finalize fits the best so far (tutti wait {args.job})")
    else:
        print(f"{args.job}: already cancelled")
    return 0


def cmd_logs(args: argparse.Namespace) -> int:
    job = _client(args).job(args.job)
    lines = job.logs()
    for line in lines[-args.tail :] if args.tail else lines:
        print(line, flush=True)
    if not args.follow:
        return 0
    last = lines[-1] if lines else None
    while True:
        final = job.is_final()
        lines = job.logs()
        start = len(lines) - lines[::-1].index(last) if last in lines else 0
        for line in lines[start:]:
            print(line, flush=True)
        last = lines[-1] if lines else last
        if final:
            print(f"-- {job.id} is {job.state.value}; no more lines will come", flush=True)
            return 0
        time.sleep(args.poll)


def cmd_delete(args: argparse.Namespace) -> int:
    job = _client(args).job(args.job)
    if not args.yes:
        if not sys.stdin.isatty():
            raise EnsembleSearchError(
                f"delete {args.job}: no terminal to confirm on; add --yes to delete without "
                "asking."
            )
        st = job.status()
        question = (
            f"delete job {job.id} ({st['state']}, {st['trials_done']} trials) with its "
            "trials, journal, predictions and pipelines?"
        )
        if not confirm(question):
            print(f"kept {job.id}")
            return 1
    n = job.delete()
    print(f"deleted {args.job} ({n} keys)")
    return 0


def cmd_extend(args: argparse.Namespace) -> int:
    job = (
        _client(args)
        .job(args.job)
        .extend(more_trials=args.more_trials, wall_seconds=args.wall_seconds)
    )
    print(f"{job.id}: queued again ({job.status()['max_trials']} trials in all)")
    return 0


def duration(text: str) -> float:
    """``30d`` -> seconds (s, m, h, d, w; a bare number is seconds)."""
    units = {"s": 1, "m": 60, "h": 3600, "d": 86400, "w": 604800}
    try:
        if text[-1] in units:
            return float(text[:-1]) * units[text[-1]]
        return float(text)
    except (ValueError, IndexError):
        raise argparse.ArgumentTypeError(
            f"{text!r}: use a number with s, m, h, d or w, e.g. 30d"
        ) from None


def cmd_purge(args: argparse.Namespace) -> int:
    gone = _client(args).purge(args.older_than, dry_run=args.dry_run)
    verb = "would delete" if args.dry_run else "deleted"
    print(f"{verb} {len(gone)} job(s)" + (": " + ", ".join(gone) if gone else ""))
    return 0


def cmd_list_workers(args: argparse.Namespace) -> int:
    found = _client(args).workers()
    if args.json:
        print_json(found)
        return 0
    rows = []
    for w in found:
        doing = (
            f"job {w['job']} trial {w.get('trial')} ({w.get('family')})"
            if w.get("job")
            else "idle"
        )
        up = time.time() - float(w.get("started_at", time.time()))
        rows.append(
            [str(w["name"]), str(w.get("host", "")), str(w.get("pid", "")), doing, f"{up:.0f}"]
        )
    if not rows:
        print("no live workers: start some with `tutti start-workers --processes N`")
        return 0
    print_table(rows, ["name", "host", "pid", "doing", "up_seconds"])
    return 0


def cmd_doctor(args: argparse.Namespace) -> int:
    findings = _client(args).doctor()
    if args.json:
        print_json([{"level": f.level, "check": f.check, "detail": f.detail} for f in findings])
    else:
        for f in findings:
            print(f"[{f.level:7}] {f.check}: {f.detail}")
    return 1 if any(f.level == "problem" for f in findings) else 0


def cmd_server(args: argparse.Namespace) -> int:
    from tuttiml.service.config import Settings
    from tuttiml.service.server import EmbeddedServer

    server = EmbeddedServer(Settings.from_env().home)
    if args.action == "status":
        st = server.status()
        print_json(st) if args.json else print_pairs(st.items())
        return 0
    if args.action == "start":
        url = server.ensure_running()
        st = server.status()
        print_json(st) if args.json else print_pairs(st.items())
        return 0 if url else 1
    stopped = server.stop()
    if args.json:
        print_json({"running": False, "was_running": stopped})
    else:
        print("stopped" if stopped else "not running")
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from tuttiml.service.demo import run_demo

    return run_demo(
        max_trials=args.max_trials,
        wall_seconds=args.wall_seconds,
        processes=args.processes,
        redis_url=args.redis_url,
        prefix=args.prefix,
        show_board=print_board,
    )
