"""The report's plots: inline SVG drawn from plain numbers (no plotting library).

Every label that came from a user passes through ``_e`` (html.escape).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from tuttiml.service._report_format import _GREY, _PALETTE, _Ctx, _e, _fmt, _num, _short

_PLOT_W, _PLOT_H = 540, 330
_MARGIN = {"left": 64, "right": 18, "top": 34, "bottom": 48}


# --------------------------------------------------------------------------- SVG plumbing


@dataclass(frozen=True)
class _Scale:
    """Linear or log10 map from data range [lo, hi] to pixels [p0, p1]."""

    lo: float
    hi: float
    p0: float
    p1: float
    log: bool = False

    def __call__(self, v: float) -> float:
        """Pixel position of data value ``v``."""
        f = math.log10 if self.log else float
        lo, hi, x = f(self.lo), f(self.hi), f(v)
        return self.p0 + (x - lo) / ((hi - lo) or 1.0) * (self.p1 - self.p0)

    def ticks(self) -> list[float]:
        """Readable tick positions inside [lo, hi]."""
        return _log_ticks(self.lo, self.hi) if self.log else _nice_ticks(self.lo, self.hi)


def _nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    """About ``n`` round tick values (steps of 1, 2, 2.5 or 5 times a power of ten)."""
    raw = (hi - lo) / n or 1.0
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    first = math.ceil(lo / step) * step
    count = math.floor((hi - first) / step + 1e-9) + 1
    return [round(first + i * step, 12) for i in range(max(count, 0))]


def _log_ticks(lo: float, hi: float) -> list[float]:
    """Ticks at 1, 2 and 5 times each power of ten inside [lo, hi]."""
    out = []
    for p in range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1):
        out += [m * 10.0**p for m in (1, 2, 5) if lo <= m * 10.0**p <= hi]
    return out


def _padded(values: Sequence[float], pad: float = 0.06) -> tuple[float, float]:
    """Range of ``values`` widened a little so marks do not sit on the frame."""
    lo, hi = min(values), max(values)
    d = (hi - lo) * pad if hi > lo else abs(lo) * 0.05 or 1.0
    return lo - d, hi + d


def _el(tag: str, text: str | None = None, *, tip: str | None = None, **attrs: Any) -> str:
    """One SVG element. ``text`` and ``tip`` (a hover title) are escaped here.

    Attribute names use ``_`` for ``-`` (a trailing ``_`` is dropped, for ``class_``); floats
    are written with one decimal and None values are left out, which keeps the markup short.
    """
    parts = []
    for key, value in attrs.items():
        if value is not None:
            shown = f"{value:.1f}" if isinstance(value, float) else value
            parts.append(f' {key.rstrip("_").replace("_", "-")}="{_e(shown)}"')
    inner = (f"<title>{_e(tip)}</title>" if tip is not None else "") + _e(text or "")
    return f"<{tag}{''.join(parts)}>{inner}</{tag}>" if inner else f"<{tag}{''.join(parts)}/>"


def _txt(x: float, y: float, s: str, anchor: str = "middle", **attrs: Any) -> str:
    """An SVG text label (escaped) at (x, y)."""
    return _el("text", s, x=float(x), y=float(y), text_anchor=anchor, **attrs)


def _rect(x: float, y: float, w: float, h: float, fill: str, **attrs: Any) -> str:
    """An SVG rectangle with its top-left corner at (x, y)."""
    return _el("rect", x=float(x), y=float(y), width=float(w), height=float(h), fill=fill, **attrs)


def _line(x1: float, y1: float, x2: float, y2: float, stroke: str, **attrs: Any) -> str:
    """An SVG line segment from (x1, y1) to (x2, y2)."""
    ends: dict[str, Any] = {"x1": float(x1), "y1": float(y1), "x2": float(x2), "y2": float(y2)}
    return _el("line", stroke=stroke, **ends, **attrs)


def _axes(
    xs: _Scale | None, ys: _Scale, *, xlabel: str, ylabel: str, yticks: bool = True
) -> list[str]:
    """Frame, grid, ticks and axis labels for a plot area (``xs`` None: caller labels x)."""
    x0, x1 = (xs.p0, xs.p1) if xs else (_MARGIN["left"], _PLOT_W - _MARGIN["right"])
    y0, y1 = ys.p0, ys.p1
    out = [_rect(x0, y1, x1 - x0, y0 - y1, "none", stroke="#9aa3ad")]
    for t in ys.ticks() if yticks else []:
        out.append(_line(x0, ys(t), x1, ys(t), "#eceff2"))
        out.append(_txt(x0 - 6, ys(t) + 4, f"{t:.4g}", "end"))
    for x, t in [(xs(t), t) for t in xs.ticks()] if xs is not None else []:
        out.append(_line(x, y0, x, y0 + 5, "#9aa3ad"))
        out.append(_txt(x, y0 + 18, f"{t:.4g}"))
    ym = (y0 + y1) / 2
    out.append(_txt((x0 + x1) / 2, y0 + 38, xlabel, class_="axis-label", font_size=12))
    rotate = f"rotate(-90 16 {ym:.1f})"
    out.append(_txt(16, ym, ylabel, class_="axis-label", font_size=12, transform=rotate))
    return out


def _svg(plot_id: str, title: str, body: list[str], *, size: tuple[int, int] | None = None) -> str:
    """Wrap SVG parts into one inline ``<svg class="plot">`` with a visible and a hover title."""
    width, height = size or (_PLOT_W, _PLOT_H)
    head = (
        f'<svg class="plot" id="{_e(plot_id)}" viewBox="0 0 {width} {height}" width="{width}" '
        f'height="{height}" role="img" font-size="11"><title>{_e(title)}</title>'
    )
    heading = _txt(width / 2, 20, title, font_size=14, font_weight=600)
    return head + heading + "".join(body) + "</svg>"


def _legend(items: Sequence[tuple[str, str]], x: float, y: float) -> list[str]:
    """A vertical legend of coloured squares and labels starting at (x, y)."""
    out = []
    for i, (label, color) in enumerate(items):
        out.append(_rect(x, y + i * 17 - 9, 11, 11, color))
        out.append(_txt(x + 16, y + i * 17, _short(label, 16), "start"))
    return out


def _scales(
    xr: tuple[float, float], yr: tuple[float, float], *, right: int = 0, xlog: bool = False
) -> tuple[_Scale, _Scale]:
    """Scales for the standard plot box, leaving ``right`` extra pixels for a legend."""
    xs = _Scale(*xr, _MARGIN["left"], _PLOT_W - _MARGIN["right"] - right, log=xlog)
    return xs, _Scale(*yr, _PLOT_H - _MARGIN["bottom"], _MARGIN["top"])


def _figure(svg: str, caption: str) -> str:
    """An SVG plot inside a figure with a caption (the caption is escaped)."""
    return f"<figure>{svg}<figcaption>{_e(caption)}</figcaption></figure>"


# --------------------------------------------------------------------------- plots


def _completed(trials: list[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """Trials that finished with a numeric score (a missing state counts as finished)."""
    ok = [t for t in trials if str(t.get("state") or "COMPLETE").upper().startswith("COMPLETE")]
    return [t for t in ok if _num(t.get("score")) is not None]


def _plot_progress(trials: list[Mapping[str, Any]], ctx: _Ctx, start: float | None) -> str:
    """Step lines of the best score so far for each family, against time or trial number."""
    done = _completed(trials)
    if all(_num(t.get("finished_at")) is not None for t in done):
        t0 = start if start is not None else min(float(t["finished_at"]) for t in done)
        pts = [((float(t["finished_at"]) - t0) / 60.0, t) for t in done]
        xlabel = "minutes since the job was created"
    else:
        pts, xlabel = [(_num(t.get("number")) or 0.0, t) for t in done], "trial number"
    series: dict[str, list[tuple[float, float]]] = {}
    for x, t in sorted(pts, key=lambda p: p[0]):
        series.setdefault(str(t.get("family")), []).append((x, float(t["score"])))
    xr, yr = _padded([x for x, _ in pts], 0.02), _padded([float(t["score"]) for t in done])
    xs, ys = _scales(xr, yr, right=120)
    body = _axes(xs, ys, xlabel=xlabel, ylabel=f"best {ctx.metric} so far")
    x_end = max(x for x, _ in pts)
    for fam, line in series.items():
        color, best, path, marks = ctx.colors.get(fam, _GREY), None, list[str](), list[str]()
        for x, s in line:
            if best is None or ctx.better(s, best):
                best, px, py = s, xs(x), ys(s)
                path.append(f"H{px:.1f} V{py:.1f}" if path else f"M{px:.1f} {py:.1f}")
                marks.append(_el("circle", cx=px, cy=py, r=3, fill=color))
        path.append(f"H{xs(x_end):.1f}")
        body.append(_el("path", d=" ".join(path), fill="none", stroke=color, stroke_width=2))
        body += marks
    body += _legend(
        [(f, ctx.colors.get(f, _GREY)) for f in sorted(series)], xs.p1 + 14, ys.p1 + 12
    )
    return _svg("plot-best-over-time", "Best score so far, per family", body)


def _plot_distribution(trials: list[Mapping[str, Any]], ctx: _Ctx) -> str:
    """Box plot plus jittered points of every finished trial's score, one column per family."""
    groups: dict[str, list[float]] = {}
    for t in _completed(trials):
        groups.setdefault(str(t.get("family")), []).append(float(t["score"]))
    ys = _scales((0, 1), _padded([s for v in groups.values() for s in v]))[1]
    body = _axes(None, ys, xlabel="family (finished trials)", ylabel=ctx.metric)
    band = (_PLOT_W - _MARGIN["left"] - _MARGIN["right"]) / len(groups)
    for i, fam in enumerate(sorted(groups)):
        vals, color = groups[fam], ctx.colors.get(fam, _GREY)
        cx = _MARGIN["left"] + band * (i + 0.5)
        q1, med, q3 = (ys(float(q)) for q in np.percentile(vals, [25, 50, 75]))
        w = min(band * 0.5, 60)
        body.append(_line(cx, ys(min(vals)), cx, ys(max(vals)), color))
        box = {"fill_opacity": 0.18, "stroke": color}
        body.append(_rect(cx - w / 2, q3, w, max(q1 - q3, 1), color, **box))
        body.append(_line(cx - w / 2, med, cx + w / 2, med, color, stroke_width=2.5))
        for j, v in enumerate(vals):
            jit = ((j * 0.6180339887) % 1 - 0.5) * w * 0.9
            body.append(_el("circle", cx=cx + jit, cy=ys(v), r=2.6, fill=color, fill_opacity=0.7))
        body.append(_txt(cx, ys.p0 + 16, f"{_short(fam, 12)} ({len(vals)})"))
    return _svg("plot-score-distribution", "Score distribution per family", body)


def _plot_pareto(pts: list[Mapping[str, Any]], ctx: _Ctx) -> str:
    """Score against predict latency; the non-dominated candidates are joined and labelled."""
    lat = [float(p["predict_ms"]) for p in pts]
    log = min(lat) > 0 and max(lat) / min(lat) > 20
    xr = (min(lat) / 1.5, max(lat) * 1.5) if log else _padded(lat)
    xs, ys = _scales(xr, _padded([float(p["score"]) for p in pts], 0.1), xlog=log)
    xlabel = "predict_ms: ms to predict 1,000 rows" + (" (log scale)" if log else "")
    body = _axes(xs, ys, xlabel=xlabel, ylabel=ctx.metric)
    front = sorted((p for p in pts if p.get("on_front")), key=lambda p: float(p["predict_ms"]))
    path = [f"H{xs(float(p['predict_ms'])):.1f} V{ys(float(p['score'])):.1f}" for p in front]
    if path:
        d = "M" + path[0][1:].replace(" V", " ") + " " + " ".join(path[1:])
        dash: dict[str, Any] = {"stroke_width": 1.6, "stroke_dasharray": "5 3"}
        body.append(_el("path", d=d, fill="none", stroke=_PALETTE[4], **dash))
    for p in sorted(pts, key=lambda p: bool(p.get("on_front"))):
        x, y, on = xs(float(p["predict_ms"])), ys(float(p["score"])), bool(p.get("on_front"))
        fill, r = (_PALETTE[4], 5) if on else (_GREY, 3.5)
        body.append(_el("circle", tip=str(p.get("candidate")), cx=x, cy=y, r=r, fill=fill))
        if on:
            label, left = _short(p.get("candidate"), 20), x > (xs.p0 + 2 * xs.p1) / 3
            body.append(_txt(x - 7 if left else x + 7, y - 6, label, "end" if left else "start"))
    keys = [("Pareto front", _PALETTE[4]), ("dominated", _GREY)]
    body += _legend(keys, xs.p1 - 110, ys.p0 - 30)
    return _svg("plot-pareto", "Score versus predict latency", body)


_BV_PARTS: tuple[tuple[str, str, str], ...] = (("expected_loss", "expected loss", "#4d4d4d"),)
_BV_PARTS += (("bias", "bias", _PALETTE[0]), ("variance", "variance", _PALETTE[1]))


def _plot_bias_variance(rows: list[Mapping[str, Any]]) -> str:
    """Grouped bars of expected loss, bias and variance for the first eight candidates."""
    rows = rows[:8]
    vals = [_num(r.get(k)) or 0.0 for r in rows for k, _, _ in _BV_PARTS]
    ys = _scales((0, 1), (min(0.0, *vals), max(0.0, *vals) * 1.4 or 1.0))[1]
    loss = next((str(r["loss"]) for r in rows if r.get("loss")), "loss")
    body = _axes(None, ys, xlabel="candidate", ylabel=loss)
    band = (_PLOT_W - _MARGIN["left"] - _MARGIN["right"]) / len(rows)
    bw = min(band * 0.8 / 3, 26)
    for i, r in enumerate(rows):
        cx = _MARGIN["left"] + band * (i + 0.5)
        for j, (key, label, color) in enumerate(_BV_PARTS):
            v = _num(r.get(key))
            if v is not None:
                top, tip = ys(max(v, 0)), f"{r.get('candidate')}: {label} {v:.4f}"
                x, height = cx + (j - 1.5) * bw, max(ys(min(v, 0)) - top, 0.5)
                body.append(_rect(x, top, bw - 1, height, color, tip=tip))
        label = _short(r.get("candidate"), int(band / 6.5))
        body.append(_txt(cx, ys.p0 + 16, label, font_size=10.5))
    body += _legend([(label, c) for _, label, c in _BV_PARTS], _PLOT_W - 130, ys.p1 + 14)
    return _svg("plot-bias-variance", "Bias and variance, top candidates", body)


def _plot_weights(ens: Mapping[str, Any], idx: int) -> str:
    """Horizontal bars of one ensemble's member weights (negative weights go left of zero)."""
    members = [str(m) for m in ens.get("members") or []]
    weights = [_num(w) or 0.0 for w in ens.get("weights") or []]
    n = min(len(members), len(weights))
    height = _MARGIN["top"] + 26 * n + _MARGIN["bottom"] + 6
    lo, hi = min(0.0, *weights[:n]), max(0.0, *weights[:n])
    xs = _Scale(lo, hi * 1.15 or 1.0, 150, _PLOT_W - _MARGIN["right"] - 40)
    ys = _Scale(0, 1, height - _MARGIN["bottom"], _MARGIN["top"])
    body = _axes(xs, ys, xlabel="weight", ylabel="member", yticks=False)
    for i in range(n):
        y, w = _MARGIN["top"] + 8.0 + 26 * i, weights[i]
        x, right = xs(min(w, 0)), xs(max(w, 0))
        body.append(_rect(x, y, max(right - x, 0.5), 16, _PALETTE[2], tip=members[i]))
        body.append(_txt(146, y + 12, _short(members[i], 20), "end"))
        body.append(_txt(right + 4, y + 12, f"{w:.3f}", "start", font_size=10.5))
    title = f"Member weights: {_short(ens.get('candidate'), 30)}"
    return _svg(f"plot-weights-{idx}", title, body, size=(_PLOT_W, height))


def _heat_color(v: float) -> str:
    """Diverging colour for a correlation in [-1, 1]: blue, white, red."""
    v = max(-1.0, min(1.0, v))
    end = (178, 24, 43) if v > 0 else (33, 102, 172)
    return "#{:02x}{:02x}{:02x}".format(*(round(255 + (c - 255) * abs(v)) for c in end))


def _plot_corr(ens: Mapping[str, Any], idx: int) -> str:
    """Heat map of the correlation between the members' out-of-fold errors."""
    members = [str(m) for m in ens.get("members") or []]
    matrix = [list(r) for r in ens.get("error_corr") or [] if isinstance(r, Sequence)]
    n = min(len(members), len(matrix))
    cell, left, top = max(18, min(44, 300 // max(n, 1))), 170, 58
    width, height = max(left + cell * n + 90, 380), top + max(cell * n, 110) + 16
    ym, label = top + cell * n / 2, dict[str, Any](class_="axis-label", font_size=12)
    body = [_txt(left + cell * n / 2, top - 22, "member (column)", **label)]
    body.append(_txt(14, ym, "member (row)", transform=f"rotate(-90 14 {ym:.1f})", **label))
    for i in range(n):
        row_label = f"{i + 1} · {_short(members[i])}"
        body.append(_txt(left - 6, top + cell * (i + 0.5) + 4, row_label, "end"))
        body.append(_txt(left + cell * (i + 0.5), top - 6, str(i + 1)))
        for j in range(n):
            v = _num(matrix[i][j] if j < len(matrix[i]) else None)
            x, y, tip = left + cell * j, top + cell * i, f"{members[i]} / {members[j]}: {_fmt(v)}"
            color = _GREY if v is None else _heat_color(v)
            body.append(_rect(x, y, cell, cell, color, stroke="#fff", tip=tip))
            if v is not None and n <= 10:
                ink, size = "#fff" if abs(v) > 0.6 else "#222", max(9, min(11, cell // 4))
                cy = y + cell / 2 + 4
                body.append(_txt(x + cell / 2, cy, f"{v:.2f}", fill=ink, font_size=size))
    for k, v in enumerate(np.linspace(1, -1, 9)):
        body.append(_rect(width - 60, top + k * 12, 14, 12, _heat_color(float(v))))
    body.append(_txt(width - 42, top + 9, "+1", "start", font_size=10))
    body.append(_txt(width - 42, top + 105, "−1", "start", font_size=10))
    title = f"Error correlation: {_short(ens.get('candidate'), 26)}"
    return _svg(f"plot-corr-{idx}", title, body, size=(width, height))
