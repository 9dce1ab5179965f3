"""The report's small pieces: family colours, the job context, escaping, numbers, tables.

Shared by ``service.report`` (sections) and ``service._report_plots`` (inline SVG); standard
library only.
"""

from __future__ import annotations

import html
import json
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

# Okabe–Ito colours (readable with the common colour-vision deficiencies), yellow left out.
_PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#D55E00", "#56B4E9", "#000000")
_GREY = "#9a9a9a"
#: One colour per family, the same in every report whatever families a job searched; a
#: family missing here (a new one) is drawn grey until it gets its own entry.
FAMILY_COLORS: dict[str, str] = {
    "single": "#56B4E9",
    "bagging": "#0072B2",
    "boosting": "#D55E00",
    "voting": "#009E73",
    "stacking": "#CC79A7",
    "blending": "#E69F00",
    "library:selection": "#000000",
    "library:meta": "#7a5c00",
}


@dataclass(frozen=True)
class _Ctx:
    """What every section needs to know about the job: metric, its direction, family colours."""

    metric: str
    greater_is_better: bool
    direction_known: bool
    colors: dict[str, str]

    @property
    def direction(self) -> str:
        """Human text for the metric's direction, flagged when it was guessed."""
        text = "higher is better" if self.greater_is_better else "lower is better"
        return text if self.direction_known else f"{text} (assumed from the metric name)"

    def better(self, a: float, b: float) -> bool:
        """Whether score ``a`` is strictly better than ``b`` under the metric's direction."""
        return a > b if self.greater_is_better else a < b


# --------------------------------------------------------------------------- small formatting


def _e(value: Any) -> str:
    """Escape any value for HTML text or a quoted attribute (None becomes empty)."""
    return html.escape("" if value is None else str(value), quote=True)


def _num(value: Any) -> float | None:
    """Return ``value`` as a finite float, or None for missing, non-numeric, bool or inf/NaN."""
    if value is None or isinstance(value, bool):
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def _fmt(value: Any, digits: int = 4, *, sign: bool = False) -> str:
    """Fixed-point text for a number (with an explicit + when ``sign``), or an en dash."""
    x = _num(value)
    return "–" if x is None else f"{x:{'+' if sign else ''}.{digits}f}"


def _fmt_p(value: Any) -> str:
    """A p-value as text; tiny values as ``<0.001`` so they do not look exact."""
    x = _num(value)
    return "–" if x is None else "&lt;0.001" if x < 0.001 else f"{x:.3f}"


def _fmt_bytes(value: Any) -> str:
    """A size in bytes as a short human string (binary units)."""
    x = _num(value)
    power = 0 if x is None or abs(x) < 1024 else min(int(math.log(abs(x), 1024)), 3)
    if x is None or power == 0:
        return "–" if x is None else f"{x:.0f} B"
    return f"{x / 1024**power:.1f} {('KiB', 'MiB', 'GiB')[power - 1]}"


def _when(ts: Any) -> str:
    """Unix seconds as a UTC date-time string, or an en dash."""
    x = _num(ts)
    return "–" if x is None else datetime.fromtimestamp(x, UTC).strftime("%Y-%m-%d %H:%M UTC")


def _short(value: Any, n: int = 18) -> str:
    """Shorten a label for a plot axis (the full text goes into a tooltip)."""
    s = "" if value is None else str(value)
    return s if len(s) <= n else s[: n - 1] + "…"


def _rows(data: Mapping[str, Any], key: str) -> list[Mapping[str, Any]]:
    """The list of mappings under ``key``; anything that is not a mapping is skipped."""
    value = data.get(key)
    if isinstance(value, str) or not isinstance(value, Sequence):
        return []
    return [row for row in value if isinstance(row, Mapping)]


def _not_run(data: Mapping[str, Any], part: str, what: str = "Not run") -> str:
    """ "Not run" and why, when ``part`` did not run; "" when it ran (or nothing is known)."""
    gaps = data.get("not_run")
    if not isinstance(gaps, Mapping) or part not in gaps:
        return ""
    return f'<p class="notrun"><b>{_e(what)}:</b> {_e(gaps[part])}.</p>'


def _plain(value: Any) -> str:
    """Any spec value as escaped text; containers become compact JSON."""
    return _e(value if isinstance(value, str) else json.dumps(value, sort_keys=True, default=str))


def _table(head: Sequence[str], body: Iterable[Sequence[str]], num: set[int]) -> str:
    """An HTML table. Cells must be escaped already; columns in ``num`` are right-aligned."""

    def row(cells: Sequence[str], tag: str) -> str:
        tds = (
            f"<{tag}{' class=num' if i in num else ''}>{c}</{tag}>" for i, c in enumerate(cells)
        )
        return f"<tr>{''.join(tds)}</tr>"

    trs = "".join(row(r, "td") for r in body)
    return f"<table><thead>{row(head, 'th')}</thead><tbody>{trs}</tbody></table>"


def _deflist(items: Mapping[str, Any]) -> str:
    """A definition list of escaped keys and values."""
    rows = "".join(f"<dt>{_e(k)}</dt><dd>{_plain(v)}</dd>" for k, v in items.items())
    return f"<dl>{rows}</dl>"


def _share_bar(share: Any, scale: float = 160) -> str:
    """A share 0..1 as a small inline bar plus a percentage."""
    x = _num(share)
    bar = f'<span class="bar" style="width:{max(x or 0, 0) * scale:.0f}px"></span>'
    return "–" if x is None else f"{bar}{x:.1%}"
