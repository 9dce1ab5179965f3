"""What the ``tutti`` command prints: tables, the leaderboard, progress and prompts.

Column headers are the names of the vocabulary (README, "One vocabulary"): the status table
uses the keys of ``Job.status()``, the leaderboard the columns of ``Job.leaderboard()``, so
what a person reads on screen is what a script reads from ``--json`` or a notebook.
"""

from __future__ import annotations

import json
import sys
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any, TextIO

#: Tables whose Parquet bytes reach this size get an upload progress bar (one store chunk).
BAR_MIN_BYTES = 64 * 1024 * 1024

#: Status table columns (``Job.status()`` keys; ``note`` is phase, reason or stop reason;
#: one job's ``explain_parts`` follow the table, a line each).
STATUS_HEADER = (
    "job",
    "state",
    "trials_done",
    "max_trials",
    "failed",
    "metric",
    "best_score",
    "elapsed_seconds",
    "seconds_left",
    "explanations",
    "note",
)

#: Leaderboard table columns (``Job.leaderboard()`` columns; members cut to 40 characters).
BOARD_HEADER = (
    "rank",
    "candidate",
    "family",
    "members",
    "score",
    "score_std",
    "fit_seconds",
    "predict_ms",
    "exported",
)


def fmt(value: Any, digits: int = 4) -> str:
    """A cell: ``—`` for missing values, fixed decimals for floats."""
    if value is None or (isinstance(value, float) and value != value):
        return "—"
    if isinstance(value, bool):
        return "yes" if value else ""
    if isinstance(value, float):
        return f"{value:.{digits}f}"
    return str(value)


def print_table(rows: Sequence[Sequence[str]], header: Sequence[str]) -> None:
    """Left-aligned columns under a header and a rule."""
    widths = [max([len(h)] + [len(r[i]) for r in rows]) for i, h in enumerate(header)]
    print("  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)).rstrip())
    print("  ".join("─" * w for w in widths))
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())


def print_json(value: Any) -> None:
    """Indented JSON on stdout (NaN becomes null)."""
    print(json.dumps(_no_nan(value), indent=2, default=str))


def _no_nan(value: Any) -> Any:
    if isinstance(value, float) and value != value:
        return None
    if isinstance(value, Mapping):
        return {str(k): _no_nan(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_no_nan(v) for v in value]
    return value


def print_pairs(pairs: Iterable[tuple[str, Any]]) -> None:
    """``key: value`` lines with the keys aligned (one record, e.g. ``server status``)."""
    items = [(k, fmt(v)) for k, v in pairs]
    width = max((len(k) for k, _ in items), default=0)
    for k, v in items:
        print(f"{k + ':':<{width + 1}} {v}")


def status_row(st: Mapping[str, Any]) -> list[str]:
    """One row of the status table from a ``Job.status()`` dict."""
    note = st.get("phase") or st.get("reason") or st.get("stop_reason") or ""
    left = st.get("seconds_left")
    return [
        str(st["job"]),
        str(st["state"]),
        str(st["trials_done"]),
        str(st["max_trials"]),
        str(st["failed"]),
        str(st.get("metric") or "—"),
        fmt(st.get("best_score")),
        f"{float(st.get('elapsed_seconds') or 0):.0f}",
        "—" if left is None else f"{float(left):.0f}",
        explained(st),
        str(note),
    ]


def explained(st: Mapping[str, Any]) -> str:
    """``pending``, ``running``, ``done`` (with how many parts did not run) or ``failed``."""
    state = st.get("explanations")
    if not state:
        return "—"
    missing = sum(1 for v in (st.get("explain_parts") or {}).values() if v.startswith("not run"))
    return f"{state} ({missing} not run)" if missing else str(state)


def print_board(board: Any, limit: int | None = None) -> None:
    """The leaderboard table, its metric line and notes on the exported and p_value columns."""
    metric = board.attrs.get("metric", "score")
    print(f"score: cross-validated {metric}, {board.attrs.get('direction', '')}")
    has_sig = "p_value" in board.columns
    shown = board.head(limit) if limit else board
    rows = []
    for _, r in shown.iterrows():
        row = [
            fmt(r[c], 2 if c == "fit_seconds" else 1 if c == "predict_ms" else 4)
            for c in BOARD_HEADER
        ]
        row[3] = row[3][:40]
        if has_sig:
            p = r.get("p_value")
            flag = "" if p is None or p != p else ("" if r.get("distinguishable") else " ≈#1")
            row.append(fmt(p, 3) + flag)
        rows.append(row)
    header = [*BOARD_HEADER, "p_value"] if has_sig else list(BOARD_HEADER)
    print_table(rows, header)
    if limit and len(board) > limit:
        print(f"({len(board) - limit} more below rank {limit}: `tutti leaderboard JOB` shows all)")
    exported = board[board["exported"].astype(bool)] if "exported" in board.columns else board[:0]
    if len(exported):
        r = exported.iloc[0]
        print(
            f"exported: {r['candidate']} ({r['family']}, rank {r['rank']}) is the pipeline "
            "`tutti export` writes. It need not be rank 1: finalize discounts the optimism of "
            "picking the best of many trials and passes over ensembles it cannot refit in time."
        )
    if has_sig:
        print(
            "p_value: corrected repeated k-fold t-test against rank 1 (≈#1: not "
            "distinguishable at 5%); not corrected for having picked the best of many."
        )


def upload_bar(out: TextIO, min_bytes: int = BAR_MIN_BYTES) -> Callable[[int, int], None]:
    """A one-line upload progress bar on ``out`` for tables of at least ``min_bytes``.

    Redraws in place on a terminal; elsewhere (logs, CI) it prints one line per quarter.
    """
    t0 = time.monotonic()
    tty = out.isatty()
    shown = [-1]

    def show(done: int, total: int) -> None:
        if total < min_bytes:
            return
        frac = done / total if total else 1.0
        step = int(frac * 4)
        if not tty and step == shown[0]:
            return
        shown[0] = step
        bar = "#" * round(30 * frac)
        line = (
            f"upload [{bar:<30}] {done / 1e6:,.0f}/{total / 1e6:,.0f} MB "
            f"{time.monotonic() - t0:.1f} s"
        )
        out.write(f"\r{line}" if tty else f"{line}\n")
        if tty and done >= total:
            out.write("\n")
        out.flush()

    return show


def confirm(question: str, *, stdin: TextIO | None = None, out: TextIO | None = None) -> bool:
    """Ask a yes/no question (on stderr, answer from stdin); anything but y/yes means no."""
    stdin = stdin or sys.stdin
    out = out or sys.stderr
    out.write(f"{question} [y/N] ")
    out.flush()
    return stdin.readline().strip().lower() in ("y", "yes")
