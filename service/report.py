"""One self-contained HTML report for a search job: scores, honest estimates, plots and cautions.

The report is a single file with inline CSS and inline SVG drawn by the small helpers below. It
loads no script, style sheet, font or image from anywhere, so it can be mailed, archived or opened
offline and still look the same. Every string that came from a user (job name, column names,
candidate names, spec values) is passed through :func:`html.escape` before it reaches the page.

This module imports only the standard library and numpy: it runs on the client side and must stay
light (see STYLE.md, section 1).

Input schema. Every key is optional except ``job`` and ``metric``; a section whose data is missing
is left out, so a job that has just started still renders::

    {"job": {"id", "name", "state", "created_at", "finished_at"},   # times in unix seconds
     "metric": "roc_auc",
     "greater_is_better": true,        # when absent, guessed from the metric name (and said so)
     "spec": {field: value, ...},      # the search spec, shown as a definition list
     "summary": {"rows": int,
                 "columns": {"numeric": [...], "categorical": [...], "high_cardinality": [...]},
                 "missing_share": {column: share},          # 0..1, every feature
                 "class_balance": [{"label", "count", "share"}],  # classification
                 "base_rate": float | null,                 # binary classification
                 "target_stats": {name: value} | null,      # regression
                 "warnings": [str, ...]},
     "leaderboard": [{"rank", "candidate", "family", "members",  # members: list of names or int
                      "score", "score_std",            # CV mean and std, natural sign
                      "fit_seconds", "predict_ms",     # predict_ms: per 1,000 rows
                      "size_bytes", "exported",        # exported: the pipeline tutti exports
                      "diff_vs_rank1", "p_value", "distinguishable"}],  # vs rank 1; optional
     "trials": [{"number", "family", "state", "score", "finished_at"}],  # score natural sign
     "honest": {"winner_cv", "bbc_estimate", "bbc_low", "bbc_high", "holdout", "warning"},
     "explanations": {"state": "pending" | "running" | "done" | "failed",
                      "budget_seconds", "seconds",
                      "parts": [{"part", "what", "status"}]},  # status: "done", "pending",
                                                               # or "not run: <reason>"
     "bias_variance": [{"candidate", "family", "loss", "expected_loss", "bias", "variance"}],
     "pareto": [{"candidate", "score", "predict_ms", "on_front": bool}],
     "ensembles": [{"candidate", "method", "members": [...], "weights": [...],
                    "error_corr": [[...]], "gain": float}],
     "leakage": [{"column", "finding", "action"}],   # [] = the checks ran, found nothing
     "not_run": {part: why},           # checks that did not run: "leakage", "significance",
                                       # "bias_variance", "composites", "honest"
     "versions": {"tutti": "...", "scikit-learn": "...", ...},
     "warnings": [str, ...]}

Scores are shown with their natural sign (an RMSE is positive and lower is better), never with
scikit-learn's negated scorer sign.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from os import PathLike
from pathlib import Path
from typing import Any

from tuttiml.service._report_format import (
    FAMILY_COLORS,
    _Ctx,
    _deflist,
    _e,
    _fmt,
    _fmt_bytes,
    _fmt_p,
    _not_run,
    _num,
    _rows,
    _share_bar,
    _short,
    _table,
    _when,
)
from tuttiml.service._report_plots import (
    _completed,
    _figure,
    _plot_bias_variance,
    _plot_corr,
    _plot_distribution,
    _plot_pareto,
    _plot_progress,
    _plot_weights,
)
from tuttiml.service.spec import Metric, score_sign

__all__ = ["render_report", "write_report"]


_CSS = """
:root{--ink:#1d232b;--muted:#5b6570;--line:#d9dee4;--soft:#f4f6f8;--accent:#0072B2}
*{box-sizing:border-box}
body{margin:0;font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;color:var(--ink)}
main{max-width:1180px;margin:0 auto;padding:24px 28px 60px}h1{font-size:26px;margin:0 0 4px}
h2{font-size:20px;margin:34px 0 10px;border-bottom:2px solid var(--line);padding-bottom:4px}
h3{font-size:16px;margin:18px 0 6px}.meta{color:var(--muted);margin:0 0 12px}
.small{font-size:13px;color:var(--muted)}.notrun{color:#8a4b00}
nav ol{columns:3;font-size:13px;margin:8px 0;padding-left:20px}nav a{color:var(--accent)}
.box{border-left:5px solid;padding:10px 16px;margin:12px 0;border-radius:4px}
.caution{border-color:#b8860b;background:#fdf8ea}.warn{border-color:#c0392b;background:#fdeeee}
.box ul{margin:6px 0;padding-left:20px}
table{border-collapse:collapse;margin:8px 0;font-size:13.5px}
th,td{border-bottom:1px solid var(--line);padding:5px 9px;text-align:left;vertical-align:top}
th{background:var(--soft);font-weight:600}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}
td.num,td:nth-child(-n+3){white-space:nowrap}
tbody tr:nth-child(even){background:#fafbfc}
.tag{display:inline-block;padding:0 7px;border-radius:9px;font-size:12px;background:#e3eef7}
.tag.exported{background:#0072B2;color:#fff;font-weight:600}
.bar{display:inline-block;height:9px;background:var(--accent);border-radius:2px;
vertical-align:middle;margin-right:6px}
.cards{display:flex;flex-wrap:wrap;gap:12px}
.card{border:1px solid var(--line);border-radius:6px;padding:10px 14px;min-width:200px}
.card b{display:block;font-size:22px}.figs{display:flex;flex-wrap:wrap;gap:18px}
figure{margin:6px 0}figcaption{font-size:13px;color:var(--muted);max-width:540px}
svg.plot{background:#fff;border:1px solid var(--line);border-radius:4px;font-family:inherit}
dl{display:grid;grid-template-columns:max-content 1fr;gap:3px 18px;font-size:14px}
dt{font-weight:600}dd{margin:0;font-family:ui-monospace,monospace;word-break:break-word}
@media print{nav{display:none}h2{break-after:avoid}figure{break-inside:avoid}}
"""


# --------------------------------------------------------------------------- sections

_ABOUT = (
    "This page summarises one tutti search: which ensemble families were tried, how each "
    "candidate scored under cross-validation, how much of the winner's score is likely to carry "
    "over to new data, and what was checked in the input table. It is a single file with no "
    "outside dependencies, so it can be archived or passed on as it is."
)
_CAUTIONS = (
    "<b>Scores are estimates.</b> Cross-validation measures performance on a finite sample. The "
    "leaderboard's top entry was picked as the best of many trials, so its score tends to be "
    "higher than what it will reach on new data; see the honest estimate below.",
    "<b>Look for leakage.</b> A column whose value would not be known when a prediction is made "
    "(a later outcome, a timestamp after the event, an identifier assigned afterwards) inflates "
    "every score on this page. Automatic checks catch only some such columns.",
    "<b>Check groups, not only the average.</b> Compare errors and predicted outcomes across "
    "groups of people or cases that matter in your setting; a good overall score can hide much "
    "worse or unfair results for some of them.",
    "<b>Decisions about people need more than a score.</b> If the model may inform decisions "
    "about credit, health, hiring, insurance, housing, education or similar, follow the laws and "
    "rules that apply to you and have qualified people review the model and its use first.",
)
_BBC_NOTE = (
    "The bootstrap bias-corrected estimate (BBC-CV; Tsamardinos, Greasidou and Borboudakis, "
    "2018) resamples the pooled out-of-fold predictions of every configuration, picks the winner "
    "on each bootstrap sample and scores it on the rows left out. This removes most of the "
    "optimism of choosing the best of many trials without a nested cross-validation. Optimism is "
    "how much better the plain score looks than the corrected one."
)
_TTEST_NOTE = (
    "diff_vs_rank1 and p_value compare each candidate with rank 1 on the same folds using the "
    "corrected "
    "repeated k-fold t-test (Nadeau and Bengio, 2003; Bouckaert and Frank, 2004); “not "
    "distinguishable” means p ≥ 0.05. The test is not corrected for #1 having been picked as the "
    "best of many candidates, so a small p-value is weaker evidence than it looks."
)


def _box(items: Iterable[str], kind: str) -> str:
    """A caution or warning box holding a list; items must be escaped already."""
    return f'<div class="box {kind}"><ul>{"".join(f"<li>{i}</li>" for i in items)}</ul></div>'


def _header(data: Mapping[str, Any], ctx: _Ctx, toc: str) -> str:
    """Heading with job name, id, state and dates, what the page is for, and a contents list."""
    job = data["job"]
    name = job.get("name") or job.get("id") or "unnamed job"
    meta = (
        f"Job <code>{_e(job.get('id', '–'))}</code> · state "
        f'<span class="tag">{_e(job.get("state", "unknown"))}</span> · created '
        f"{_when(job.get('created_at'))} · finished {_when(job.get('finished_at'))} · metric "
        f"<b>{_e(ctx.metric)}</b> ({_e(ctx.direction)})"
    )
    return (
        f'<header><h1>Search report: {_e(name)}</h1><p class="meta">{meta}</p><p>{_ABOUT}</p>'
        f"<nav><ol>{toc}</ol></nav></header>"
    )


def _cautions(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """The standing cautions; shown for every job, whatever its results."""
    return _box(_CAUTIONS, "caution")


def _warnings(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Warnings the search itself recorded."""
    items = [_e(w) for w in data.get("warnings") or [] if w]
    return _box(items, "warn") if items else ""


def _honest(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Winner's plain CV score next to the BBC-CV estimate and interval and the hold-out score."""
    h = data.get("honest")
    if not isinstance(h, Mapping) or all(v is None for v in h.values()):
        return _not_run(data, "honest")
    keys = ("winner_cv", "bbc_estimate", "bbc_low", "bbc_high")
    cv, bbc, lo, hi = (_num(h.get(k)) for k in keys)
    cards = [("Plain CV score of the winner", _fmt(cv)), ("Bias-corrected (BBC-CV)", _fmt(bbc))]
    if lo is not None or hi is not None:
        cards.append(("Bootstrap interval", f"{_fmt(lo)} – {_fmt(hi)}"))
    if _num(h.get("holdout")) is not None:
        cards.append(("Hold-out score", _fmt(h.get("holdout"))))
    if cv is not None and bbc is not None:
        optimism = cv - bbc if ctx.greater_is_better else bbc - cv
        cards.append(("Optimism of the plain score", f"{optimism:+.4f}"))
    card = '<div class="card"><span class="small">{}</span><b>{}</b></div>'
    out = '<div class="cards">' + "".join(card.format(*c) for c in cards) + "</div>"
    if h.get("warning"):
        out += f'<div class="box warn"><b>The estimates disagree.</b> {_e(h["warning"])}</div>'
    units = f"Values are {_e(ctx.metric)}, {_e(ctx.direction)}."
    return out + f'<p class="small">{units} {_BBC_NOTE}</p>'


def _explanations(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Which checks ran: each part is done, pending or not run (with why); never implied."""
    ex = data.get("explanations")
    if not isinstance(ex, Mapping):
        return ""
    state = str(ex.get("state") or "unknown")
    budget, took = _num(ex.get("budget_seconds")), _num(ex.get("seconds"))
    head = f'<p>Explanations <span class="tag">{_e(state)}</span>'
    if budget is not None:
        head += f" · budget {budget:.0f} s"
    if took is not None:
        head += f" · took {took:.0f} s"
    head += ". They run after the model is committed, within their own time budget.</p>"
    if state in ("pending", "running"):
        head += (
            "<p>This report was made before they finished: the sections they fill are "
            "missing, not empty. Make the report again once they are done.</p>"
        )
    keys = ("part", "what", "status")
    body = [[_e(r.get(k)) for k in keys] for r in _rows(ex, "parts")]
    return head + _table(["part", "what it checks", "status"], body, set())


def _members_text(members: Any) -> str:
    """Leaderboard 'members' cell: a count plus the escaped member names."""
    if isinstance(members, Sequence) and not isinstance(members, str):
        names = _short(", ".join(str(m) for m in members), 60)
        return f'{len(members)} <span class="small">{_e(names)}</span>'
    return _e(members if members is not None else "–")


_FLAG: dict[Any, str] = {
    False: '<span class="tag">not distinguishable</span>',
    True: "distinguishable",
}


def _leaderboard_row(r: Mapping[str, Any], sig: bool) -> list[str]:
    """The cells of one leaderboard row (escaped); the exported candidate carries a tag."""
    name = _e(r.get("candidate"))
    if r.get("exported") is True:
        name += ' <span class="tag exported">exported</span>'
    cells = [_e(r.get("rank", "–")), name, _e(r.get("family"))]
    cells += [_members_text(r.get("members")), _fmt(r.get("score")), _fmt(r.get("score_std"))]
    cells += [_fmt(r.get("fit_seconds"), 2), _fmt(r.get("predict_ms"), 2)]
    cells.append(_fmt_bytes(r.get("size_bytes")))
    if sig:
        diff = "reference" if _num(r.get("rank")) == 1 else _fmt(r.get("diff_vs_rank1"), sign=True)
        cells += [diff, _fmt_p(r.get("p_value"))]
        cells.append(_FLAG.get(r.get("distinguishable"), "–"))
    return cells


def _exported_note(rows: Sequence[Mapping[str, Any]]) -> str:
    """Which candidate the exported pipeline is, and why it may not be rank 1."""
    chosen = [r for r in rows if r.get("exported") is True]
    if not chosen:
        return '<p class="small">No candidate is exported yet (the job is not final).</p>'
    r = chosen[0]
    why = (
        ""
        if _num(r.get("rank")) == 1
        else " It is not rank 1: finalize takes the optimism of having picked the best of many "
        "trials off their scores before comparing them with the library ensembles, and passes "
        "over ensembles whose refit would not fit in the time left."
    )
    return (
        f'<p class="box exported-note"><b>Exported:</b> {_e(r.get("candidate"))} '
        f"({_e(r.get('family'))}, rank {_e(r.get('rank'))}) is the pipeline that "
        f"<code>tutti export</code> and <code>job.best_pipeline()</code> return.{why}</p>"
    )


def _leaderboard(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """The ranked candidates, the exported one marked, with significance against #1."""
    rows = sorted(_rows(data, "leaderboard"), key=lambda r: _num(r.get("rank")) or math.inf)
    if not rows:
        return ""
    sig = any(k in r for r in rows for k in ("diff_vs_rank1", "p_value", "distinguishable"))
    head = ["rank", "candidate", "family", "members", "score", "score_std", "fit_seconds"]
    head += ["predict_ms", "size_bytes"]
    head += ["diff_vs_rank1", "p_value", "distinguishable"] if sig else []
    table = _table(head, [_leaderboard_row(r, sig) for r in rows], {0, 4, 5, 6, 7, 8, 9, 10})
    note = f'<p class="small">{_TTEST_NOTE}</p>' if sig else ""
    if not sig and _not_run(data, "significance"):
        note = _not_run(data, "significance").replace(
            "Not run:", "Significance against #1 not run:"
        )
    return (
        f"<p>score: cross-validated {_e(ctx.metric)}, {_e(ctx.direction)}, the mean over folds; "
        "score_std: its standard deviation over folds; fit_seconds: fitting time summed over "
        "folds; predict_ms: milliseconds to predict 1,000 rows.</p>"
        f"{_exported_note(rows)}{table}{note}"
    )


def _progress(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Best-so-far and score-distribution plots, from the trial list."""
    trials = _rows(data, "trials")
    if not _completed(trials):
        return ""
    states: dict[str, int] = {}
    for t in trials:
        state = str(t.get("state") or "COMPLETE").lower()
        states[state] = states.get(state, 0) + 1
    counts = ", ".join(f"{n} {_e(s)}" for s, n in sorted(states.items()))
    progress = _plot_progress(trials, ctx, _num(data["job"].get("created_at")))
    figs = _figure(progress, "Each line is a family's best score so far; dots mark improvements.")
    figs += _figure(
        _plot_distribution(trials, ctx),
        "Every finished trial is a dot; boxes span the middle half, the thick line is the median.",
    )
    return f'<p>{len(trials)} trials: {counts}.</p><div class="figs">{figs}</div>'


def _pareto(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Score against prediction latency."""
    pts = [p for p in _rows(data, "pareto") if _num(p.get("score")) is not None]
    pts = [p for p in pts if (_num(p.get("predict_ms")) or 0) > 0]
    if not pts:
        return ""
    return _figure(
        _plot_pareto(pts, ctx),
        "Each dot is a candidate. Highlighted ones are beaten on both score and predict time by "
        "no other candidate; the dashed staircase joins them.",
    )


def _bias_variance(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Bias/variance bars for the top candidates."""
    rows = _rows(data, "bias_variance")
    if not rows:
        return _not_run(data, "bias_variance")
    return _figure(
        _plot_bias_variance(rows),
        "Expected loss split into bias and variance over refits on resampled training data. For "
        "losses other than squared error the parts need not add up to the total.",
    )


_CORR_NOTE = (
    "Correlation of the members' out-of-fold errors. Low or negative values mean the members "
    "err on different rows, which is what lets a combination beat its parts."
)


def _ensembles(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """For each ensemble: method, gain over its best member, weights and error correlations."""
    out = []
    for i, ens in enumerate(_rows(data, "ensembles"), start=1):
        figs, n = "", len(ens.get("members") or [])
        if n and ens.get("weights"):
            figs += _figure(_plot_weights(ens, i), "Weight of each member in the combination.")
        if n and ens.get("error_corr"):
            figs += _figure(_plot_corr(ens, i), _CORR_NOTE)
        gain = _num(ens.get("gain"))
        gain_text = "" if gain is None else f" Gain over its best single member: {gain:+.4f}."
        title = f'{_e(ens.get("candidate"))} <span class="tag">{_e(ens.get("method"))}</span>'
        out.append(f'<h3>{title}</h3><p>{n} members.{gain_text}</p><div class="figs">{figs}</div>')
    gap = _not_run(data, "composites")
    return "".join(out) + (
        gap.replace("Not run:", "Diagnostics of composites not run:") if out else ""
    )


def _leakage(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """What the leakage checks found and what was done about it, or that they did not run.

    Only a list (even an empty one) means the checks ran; "not run" says why when they did
    not, and with neither the section is left out. A check that did not run is never shown
    as a clean result.
    """
    gap = _not_run(data, "leakage")
    if gap or data.get("leakage") is None:
        return gap
    keys = ("column", "finding", "action")
    body = [[_e(r.get(k)) for k in keys] for r in _rows(data, "leakage")]
    if not body:
        return "<p>The leakage checks ran and found nothing to report.</p>"
    return _table(["column", "finding", "action taken"], body, set())


def _summary_tables(s: Mapping[str, Any]) -> list[str]:
    """Column types, missing shares (top 20) and class balance from the data summary."""
    out = []
    cols = s.get("columns")
    if isinstance(cols, Mapping) and cols:
        listed = [(k, v) for k, v in cols.items() if isinstance(v, Sequence)]
        body = [[_e(k), str(len(v)), _e(_short(", ".join(map(str, v)), 200))] for k, v in listed]
        out.append("<h3>Columns by type</h3>" + _table(["type", "count", "columns"], body, {1}))
    missing = s.get("missing_share")
    if isinstance(missing, Mapping) and missing:
        out.append(_missing_table(missing))
    balance = [r for r in _rows(s, "class_balance") if "label" in r]
    if balance:
        body = [
            [_e(r["label"]), _e(_fmt_count(r.get("count"))), _share_bar(r.get("share"))]
            for r in balance
        ]
        out.append("<h3>Class balance</h3>" + _table(["class", "rows", "share"], body, {1}))
    return out


def _fmt_count(value: Any) -> str:
    number = _num(value)
    return "–" if number is None else f"{number:,.0f}"


def _missing_table(missing: Mapping[str, Any]) -> str:
    """Columns that have missing values, most first (top 20), or a line saying none has any."""
    gaps = [(c, v) for c, v in missing.items() if (_num(v) or 0) > 0]
    if not gaps:
        none = f"None of the {len(missing)} feature columns has missing values."
        return f"<h3>Missing values</h3><p>{none}</p>"
    top = sorted(gaps, key=lambda kv: -(_num(kv[1]) or 0))[:20]
    label = "Missing values (top 20 columns)" if len(gaps) > 20 else "Missing values"
    note = f"<p>{len(gaps)} of {len(missing)} feature columns have missing values.</p>"
    body = [[_e(c), _share_bar(v)] for c, v in top]
    return f"<h3>{label}</h3>{note}" + _table(["column", "missing share"], body, set())


def _data_summary(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Rows, column types, missing values and the target's distribution."""
    s = data.get("summary")
    if not isinstance(s, Mapping) or not s:
        return ""
    out = [f"<p>{_num(s['rows']):,.0f} rows.</p>"] if _num(s.get("rows")) is not None else []
    out += _summary_tables(s)
    if _num(s.get("base_rate")) is not None:
        out.append(f"<p>Base rate (share of the positive class): {float(s['base_rate']):.1%}.</p>")
    if isinstance(s.get("target_stats"), Mapping) and s["target_stats"]:
        out.append("<h3>Target</h3>" + _deflist(s["target_stats"]))
    notes = [_e(w) for w in s.get("warnings") or [] if w]
    return "".join(out) + (_box(notes, "warn") if notes else "")


def _spec(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """The search spec as a definition list."""
    spec = data.get("spec")
    return _deflist(spec) if isinstance(spec, Mapping) and spec else ""


def _versions(data: Mapping[str, Any], ctx: _Ctx) -> str:
    """Versions of the software the job ran with (tutti, scikit-learn, LightGBM, …)."""
    versions = data.get("versions")
    return _deflist(versions) if isinstance(versions, Mapping) and versions else ""


_SECTIONS = (
    ("cautions", "Cautions", _cautions),
    ("warnings", "Warnings from the search", _warnings),
    ("explanations", "Which checks ran", _explanations),
    ("honest", "Honest estimate of the winner", _honest),
    ("leaderboard", "Leaderboard", _leaderboard),
    ("progress", "Search progress by family", _progress),
    ("pareto", "Score versus prediction speed", _pareto),
    ("bias-variance", "Bias and variance of the top candidates", _bias_variance),
    ("ensembles", "Inside the ensembles", _ensembles),
    ("leakage", "Leakage report", _leakage),
    ("data", "Data summary", _data_summary),
    ("spec", "Search spec", _spec),
    ("versions", "Software versions", _versions),
)


# --------------------------------------------------------------------------- public API


def _context(data: Any) -> _Ctx:
    """Check the two required keys and derive the metric's direction."""
    if not isinstance(data, Mapping):
        raise TypeError(f"render_report: expected a mapping, got {type(data).__name__}.")
    problems = []
    if not isinstance(data.get("job"), Mapping):
        problems.append(f"'job' must be a mapping (got {type(data.get('job')).__name__})")
    metric = data.get("metric")
    if not isinstance(metric, str) or not metric:
        problems.append(f"'metric' must be a non-empty string (got {metric!r})")
    if problems:
        raise ValueError(f"render_report: {'; '.join(problems)}; add them to the report data.")
    gib = data.get("greater_is_better")
    known = isinstance(gib, bool)
    if not known:
        if str(metric) not in {m.value for m in Metric}:
            raise ValueError(
                f"render_report: metric {metric!r} is not one of tutti's, so its direction is "
                "unknown; add 'greater_is_better' (true or false) to the report data."
            )
        gib, known = score_sign(str(metric)) > 0, True
    return _Ctx(
        str(metric), greater_is_better=bool(gib), direction_known=known, colors=FAMILY_COLORS
    )


def render_report(data: Mapping[str, Any]) -> str:
    """Render a job's results as one self-contained HTML page.

    Each section appears only when its data is present; the cautions always appear. The page
    loads nothing from the network when opened, and every user-provided string is escaped.

    Args:
        data: The report data; see the module docstring for the schema. Only ``job`` and
            ``metric`` are required.

    Returns:
        The complete HTML document.

    Raises:
        TypeError: If ``data`` is not a mapping.
        ValueError: If ``job`` is not a mapping or ``metric`` is not a non-empty string.
    """
    ctx = _context(data)
    parts = [(anchor, head, fn(data, ctx)) for anchor, head, fn in _SECTIONS]
    parts = [p for p in parts if p[2]]
    toc = "".join(f'<li><a href="#{a}">{h}</a></li>' for a, h, _ in parts)
    sections = "".join(f'<section id="{a}"><h2>{h}</h2>{b}</section>' for a, h, b in parts)
    job = data["job"]
    title = _e(f"tutti report: {job.get('name') or job.get('id') or 'job'}")
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{title}</title><style>{_CSS}</style></head><body><main>"
        f"{_header(data, ctx, toc)}{sections}"
        '<footer class="small"><p>Made by tutti from the job\'s stored results.</p></footer>'
        "</main></body></html>\n"
    )


def write_report(data: Mapping[str, Any], path: str | PathLike[str]) -> Path:
    """Render the report and write it as UTF-8, creating missing parent directories.

    Args:
        data: The report data, as for :func:`render_report`.
        path: Where to write the HTML file.

    Returns:
        The path written, as a :class:`~pathlib.Path`.

    Raises:
        TypeError: If ``data`` is not a mapping.
        ValueError: If ``job`` or ``metric`` is missing or malformed.
    """
    out = Path(path)
    text = render_report(data)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")
    return out
