"""The HTML report: sections, escaping, self-containment, plots and a real browser render."""

from __future__ import annotations

import copy
import json
import re
import shutil
import struct
import subprocess
import zlib
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from tuttiml.service.report import FAMILY_COLORS, render_report, write_report

SAMPLE = Path(__file__).resolve().parents[1] / "fixtures" / "report_sample.json"
HEADINGS = [
    "Cautions",
    "Warnings from the search",
    "Honest estimate of the winner",
    "Leaderboard",
    "Search progress by family",
    "Score versus prediction speed",
    "Bias and variance of the top candidates",
    "Inside the ensembles",
    "Leakage report",
    "Data summary",
    "Search spec",
    "Software versions",
]
VOID = {
    "area",
    "base",
    "br",
    "col",
    "embed",
    "hr",
    "img",
    "input",
    "link",
    "meta",
    "source",
    "wbr",
}


@pytest.fixture
def sample() -> dict[str, Any]:
    return json.loads(SAMPLE.read_text(encoding="utf-8"))


@pytest.fixture
def minimal() -> dict[str, Any]:
    return {"job": {"id": "j-1"}, "metric": "roc_auc"}


class _TagChecker(HTMLParser):
    """Records every start/end tag and complains when an end tag does not close the open one."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.h2: list[str] = []
        self._in_h2 = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag not in VOID:
            self.stack.append(tag)
        self._in_h2 = tag == "h2"
        if self._in_h2:
            self.h2.append("")

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        """Self-closing SVG elements (``<rect .../>``) open nothing."""

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()
        self._in_h2 = False

    def handle_data(self, data: str) -> None:
        if self._in_h2:
            self.h2[-1] += data


def _section(page: str, anchor: str) -> str:
    found = re.search(rf'<section id="{anchor}">(.*?)</section>', page, re.DOTALL)
    return found.group(1) if found else ""


def _check_tags(page: str) -> _TagChecker:
    checker = _TagChecker()
    checker.feed(page)
    checker.close()
    assert checker.errors == []
    assert checker.stack == [], f"unclosed tags: {checker.stack}"
    return checker


# --------------------------------------------------------------------------- structure


def test_full_sample_renders_well_formed_with_every_section(sample: dict[str, Any]) -> None:
    page = render_report(sample)
    assert page.startswith("<!DOCTYPE html>")
    assert _check_tags(page).h2 == HEADINGS


def test_minimal_data_renders_title_and_cautions_only(minimal: dict[str, Any]) -> None:
    page = render_report(minimal)
    assert _check_tags(page).h2 == ["Cautions"]
    assert "j-1" in page and "roc_auc" in page
    assert page.count('class="plot"') == 0


def test_cautions_cover_optimism_leakage_fairness_and_decisions(minimal: dict[str, Any]) -> None:
    page = render_report(minimal)
    for phrase in ("best of many trials", "leakage", "groups", "credit, health, hiring"):
        assert phrase in page


@pytest.mark.parametrize("key", ["honest", "leaderboard", "trials", "pareto", "ensembles"])
def test_each_section_appears_only_with_its_data(sample: dict[str, Any], key: str) -> None:
    heading = {
        "honest": "Honest estimate of the winner",
        "leaderboard": "Leaderboard",
        "trials": "Search progress by family",
        "pareto": "Score versus prediction speed",
        "ensembles": "Inside the ensembles",
    }[key]
    del sample[key]
    headings = _check_tags(render_report(sample)).h2
    assert heading not in headings
    assert len(headings) == len(HEADINGS) - 1


def test_page_is_self_contained(sample: dict[str, Any]) -> None:
    page = render_report(sample)
    assert "http://" not in page and "https://" not in page
    for pattern in (r"<script", r"<link", r"<img", r"<iframe", r"@import", r"url\(", r"\ssrc="):
        assert not re.search(pattern, page, re.IGNORECASE), pattern
    assert all(href.startswith("#") for href in re.findall(r'href="([^"]*)"', page))


def test_user_strings_are_escaped_everywhere(sample: dict[str, Any]) -> None:
    # one numbered payload per place a user string reaches the page, short enough that no
    # label shortening (12 characters in plots) can cut the number off
    def evil(i: int) -> str:
        return f"<script>{i:02d}"

    sample["job"]["name"] = evil(1)
    sample["summary"]["missing_share"][evil(2)] = 0.9
    sample["summary"]["columns"]["numeric"].append(evil(3))
    sample["leaderboard"][0]["candidate"] = evil(4)
    sample["leaderboard"][1]["members"] = [evil(5)]
    sample["trials"][0]["family"] = evil(6)
    sample["pareto"][0]["candidate"] = evil(7)
    sample["ensembles"][0]["members"][0] = evil(8)
    sample["leakage"][0]["column"] = evil(9)
    sample["spec"][evil(10)] = evil(11)
    sample["versions"]["tutti"] = evil(12)
    sample["warnings"].append(evil(13))
    sample["honest"]["warning"] = evil(14)
    page = render_report(sample)
    assert "<script" not in page
    # every payload is shown, escaped: none was dropped on the way (which would hide a place
    # that never escapes because the test could not reach it)
    missing = [i for i in range(1, 15) if f"&lt;script&gt;{i:02d}" not in page]
    assert missing == []
    _check_tags(page)


def test_ampersands_and_quotes_in_names_do_not_break_attributes(sample: dict[str, Any]) -> None:
    sample["ensembles"][0]["members"][1] = 'trees "deep" & wide'
    page = render_report(sample)
    assert "trees &quot;deep&quot; &amp; wide" in page
    _check_tags(page)


# --------------------------------------------------------------------------- content


def test_leaderboard_states_direction_and_significance_caveat(sample: dict[str, Any]) -> None:
    # the sample is a real job (tests/fixtures/make_report_sample.py): expectations come from it
    page = render_report(sample)
    assert sample["metric"] == "log_loss" and "lower is better" in page
    board = _section(page, "leaderboard")
    for row in sample["leaderboard"]:
        cells = f"<td class=num>{row['score']:.4f}</td><td class=num>{row['score_std']:.4f}</td>"
        assert cells in board, row["candidate"]
    tested = [r for r in sample["leaderboard"] if r.get("p_value") is not None]
    assert tested  # #1 was compared with the next candidates
    assert "not corrected for #1 having been picked as the best of many" in page
    for row in tested:
        p = "&lt;0.001" if row["p_value"] < 0.001 else f"{row['p_value']:.3f}"
        flag = "distinguishable" if row["distinguishable"] else "not distinguishable"
        assert re.search(rf"<td class=num>{p}</td><td[^>]*>(<span[^>]*>)?{flag}", board), row


def test_leaderboard_without_significance_has_no_test_columns(sample: dict[str, Any]) -> None:
    for row in sample["leaderboard"]:
        for key in ("diff_vs_rank1", "p_value", "distinguishable"):
            row.pop(key, None)
    page = render_report(sample)
    assert "p_value" not in page and "not distinguishable" not in page


def test_exported_candidate_is_tagged_and_explained(sample: dict[str, Any]) -> None:
    # finalize may export a candidate below rank 1 (README); mark rank 2 as that one
    for r in sample["leaderboard"]:
        r["exported"] = r["rank"] == 2
    page = render_report(sample)
    chosen = next(r for r in sample["leaderboard"] if r["exported"])
    assert page.count('<span class="tag exported">exported</span>') == 1
    row = re.search(r"<tr>(?:(?!</tr>).)*tag exported(?:(?!</tr>).)*</tr>", page)
    assert row and f">{chosen['candidate']} <span" in row.group(0)
    assert f"<b>Exported:</b> {chosen['candidate']}" in page and "It is not rank 1" in page
    for row in sample["leaderboard"]:
        row["exported"] = False
    assert "No candidate is exported yet" in render_report(sample)


def test_family_colours_are_the_same_in_every_report(sample: dict[str, Any]) -> None:
    # a job that searched only some families draws each in the colour it has everywhere
    def fill_of(page: str, family: str) -> set[str]:
        legend = re.findall(
            r'fill="(#[0-9A-Fa-f]{6})"[^>]*/?>(?:</rect>)?<text[^>]*>([^<]+)<', page
        )
        return {c for c, label in legend if label == family}

    full = render_report(sample)
    families = sorted({t["family"] for t in sample["trials"]} & {f for f in FAMILY_COLORS})
    families = [f for f in families if fill_of(full, f)]  # drawn (has completed trials)
    assert len(families) >= 3
    dropped = copy.deepcopy(sample)
    dropped["trials"] = [t for t in sample["trials"] if t["family"] != families[0]]
    part = render_report(dropped)
    for fam in families[1:]:
        assert fill_of(full, fam) and fill_of(full, fam) == fill_of(part, fam), fam


def test_honest_section_shows_all_estimates_and_the_warning(sample: dict[str, Any]) -> None:
    honest = sample["honest"]
    page = render_report(sample)
    section = _section(page, "honest")
    cv, bbc, lo, hi = (honest[k] for k in ("winner_cv", "bbc_estimate", "bbc_low", "bbc_high"))
    for text in (f"{cv:.4f}", f"{bbc:.4f}", f"{lo:.4f} – {hi:.4f}", "Tsamardinos"):
        assert text in section
    assert f"{bbc - cv:+.4f}" in section  # log loss: lower is better, so optimism = bbc - cv
    assert ("The estimates disagree." in section) == bool(honest.get("warning"))
    sample["honest"]["warning"] = "hold-out and estimate differ"
    assert "The estimates disagree." in render_report(sample)
    del sample["honest"]["warning"]
    assert "The estimates disagree." not in render_report(sample)


def test_the_sample_is_a_real_job_on_the_palmer_penguins(sample: dict[str, Any]) -> None:
    # palmerpenguins documentation (from memory): 344 penguins: 152 Adelie, 124 Gentoo,
    # 68 Chinstrap
    summary = sample["summary"]
    assert summary["rows"] == 344
    counts = {r["label"].split()[0]: r["count"] for r in summary["class_balance"]}
    assert counts == {"Adelie": 152, "Gentoo": 124, "Chinstrap": 68}
    data = _section(render_report(sample), "data")
    assert "<h3>Class balance</h3>" in data and "<td class=num>152</td>" in data
    # the raw table's constant columns were dropped before the search and reported as such
    leakage = {r["column"]: r["action"] for r in sample["leakage"]}
    assert leakage == dict.fromkeys(summary["dropped"], "dropped before the search")
    assert sample["not_run"] == {}  # every check ran in the sample job


def test_lower_is_better_metric_is_stated_and_optimism_sign_follows(
    minimal: dict[str, Any],
) -> None:
    minimal.update(metric="rmse", greater_is_better=False)
    minimal["honest"] = {"winner_cv": 1.20, "bbc_estimate": 1.35}
    page = render_report(minimal)
    assert "lower is better" in page and "assumed" not in page
    assert "+0.1500" in page


def test_direction_comes_from_the_metric_when_the_data_omits_it(minimal: dict[str, Any]) -> None:
    # log loss: smaller is better (scikit-learn's log_loss docs; its scorer is negated)
    minimal.pop("greater_is_better", None)
    minimal["metric"] = "log_loss"
    page = render_report(minimal)
    assert "lower is better" in page and "assumed" not in page


def test_unknown_metric_without_direction_is_refused(minimal: dict[str, Any]) -> None:
    minimal.pop("greater_is_better", None)
    minimal["metric"] = "weird_loss"
    with pytest.raises(ValueError, match="greater_is_better"):
        render_report(minimal)


def test_missing_share_lists_at_most_twenty_columns(minimal: dict[str, Any]) -> None:
    minimal["summary"] = {"missing_share": {f"col_{i:02d}": i / 100 for i in range(30)}}
    page = render_report(minimal)
    shown = set(re.findall(r"col_\d\d", page))
    assert shown == {f"col_{i:02d}" for i in range(10, 30)}
    assert "top 20 columns" in page


def test_regression_summary_shows_target_stats(minimal: dict[str, Any]) -> None:
    minimal["summary"] = {"rows": 1500, "target_stats": {"mean": 12.5, "std": 3.1}}
    page = render_report(minimal)
    assert "<dt>mean</dt><dd>12.5</dd>" in page and "1,500 rows" in page


def test_empty_leakage_list_says_nothing_was_found(minimal: dict[str, Any]) -> None:
    minimal["leakage"] = []
    assert "found nothing to report" in render_report(minimal)


# --------------------------------------------------------------------------- plots


def _plots(page: str) -> list[str]:
    return re.findall(r'<svg class="plot".*?</svg>', page, re.DOTALL)


def test_sample_has_every_plot_with_title_and_axis_labels(sample: dict[str, Any]) -> None:
    plots = _plots(render_report(sample))
    ids = [re.search(r'id="([^"]+)"', p).group(1) for p in plots]  # type: ignore[union-attr]
    expected_ensembles = []
    for i, ens in enumerate(sample["ensembles"], start=1):
        if ens.get("weights"):
            expected_ensembles.append(f"plot-weights-{i}")
        if ens.get("error_corr"):
            expected_ensembles.append(f"plot-corr-{i}")
    assert ids == [
        "plot-best-over-time",
        "plot-score-distribution",
        "plot-pareto",
        "plot-bias-variance",
        *expected_ensembles,
    ]
    assert expected_ensembles  # the sample has an ensemble with error correlations
    for plot in plots:
        assert "<title>" in plot
        assert plot.count('class="axis-label"') == 2


def test_pareto_front_is_highlighted(sample: dict[str, Any]) -> None:
    pareto = next(p for p in _plots(render_report(sample)) if 'id="plot-pareto"' in p)
    on_front = sum(1 for p in sample["pareto"] if p["on_front"])
    assert pareto.count('r="5"') == on_front
    assert "stroke-dasharray" in pareto


def test_plots_survive_odd_inputs(minimal: dict[str, Any]) -> None:
    minimal["trials"] = [
        {"number": 0, "family": "single", "state": "COMPLETE", "score": 0.5},
        {"number": 1, "family": "single", "state": "FAIL", "score": None},
        {"number": 2, "family": "bagging", "score": float("nan")},
    ]
    minimal["pareto"] = [{"candidate": "a", "score": 0.5, "predict_ms": 2.0, "on_front": True}]
    minimal["bias_variance"] = [{"candidate": "a", "bias": 0.1, "variance": -0.01}]
    minimal["ensembles"] = [
        {
            "candidate": "e",
            "members": ["a", "b"],
            "weights": [0.7, -0.3],
            "error_corr": [[1.0, None], [None, 1.0]],
        }
    ]
    page = render_report(minimal)
    _check_tags(page)
    assert len(_plots(page)) == 6
    assert not re.search(r"\bnan\b", page, re.IGNORECASE)


# --------------------------------------------------------------------------- API and errors


def test_write_report_creates_parents_and_returns_the_path(
    tmp_path: Path, sample: dict[str, Any]
) -> None:
    out = write_report(sample, tmp_path / "nested" / "report.html")
    assert out == tmp_path / "nested" / "report.html"
    assert out.read_text(encoding="utf-8") == render_report(sample)


def test_input_data_is_not_modified(sample: dict[str, Any]) -> None:
    before = copy.deepcopy(sample)
    render_report(sample)
    assert sample == before


@pytest.mark.parametrize(
    ("data", "error", "match"),
    [
        ([], TypeError, "expected a mapping, got list"),
        ({"metric": "roc_auc"}, ValueError, r"'job' must be a mapping \(got NoneType\)"),
        ({"job": {}, "metric": ""}, ValueError, r"'metric' must be a non-empty string \(got ''\)"),
        ({}, ValueError, "'job' must be a mapping .*; 'metric' must be"),
    ],
)
def test_bad_input_raises_with_a_clear_message(data: Any, error: type, match: str) -> None:
    with pytest.raises(error, match=match):
        render_report(data)


# --------------------------------------------------------------------------- real browser


def _chromium() -> str | None:
    if Path("/usr/bin/chromium").exists():
        return "/usr/bin/chromium"
    return shutil.which("chromium")


def _paeth(a: int, b: int, c: int) -> int:
    p = a + b - c
    pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
    return a if pa <= pb and pa <= pc else (b if pb <= pc else c)


def _unfilter(kind: int, row: bytearray, prev: bytearray, bpp: int) -> bytearray:
    """Undo one PNG row filter (PNG spec, section 9)."""
    if kind == 0:
        return row
    if kind == 2:
        up = np.frombuffer(row, np.uint8).astype(np.uint16) + np.frombuffer(prev, np.uint8)
        return bytearray((up & 255).astype(np.uint8).tobytes())
    for i in range(len(row)):
        left = row[i - bpp] if i >= bpp else 0
        if kind == 1:
            row[i] = (row[i] + left) & 255
        elif kind == 3:
            row[i] = (row[i] + ((left + prev[i]) >> 1)) & 255
        else:
            row[i] = (row[i] + _paeth(left, prev[i], prev[i - bpp] if i >= bpp else 0)) & 255
    return row


def _decode_png(path: Path) -> np.ndarray:
    """Decode an 8-bit, non-interlaced RGB(A) PNG with zlib and struct only; returns RGB."""
    blob = path.read_bytes()
    assert blob[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG file"
    pos, idat, header = 8, bytearray(), None
    while pos < len(blob):
        length, kind = struct.unpack(">I4s", blob[pos : pos + 8])
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", blob[pos + 8 : pos + 8 + length])
        elif kind == b"IDAT":
            idat += blob[pos + 8 : pos + 8 + length]
        pos += 12 + length
    assert header is not None
    width, height, depth, color, _, _, interlace = header
    assert depth == 8 and color in (2, 6) and interlace == 0, header
    bpp = 3 if color == 2 else 4
    raw, stride = zlib.decompress(bytes(idat)), width * bpp
    pixels, prev = np.empty((height, stride), np.uint8), bytearray(stride)
    for y in range(height):
        start = y * (stride + 1)
        prev = _unfilter(raw[start], bytearray(raw[start + 1 : start + 1 + stride]), prev, bpp)
        pixels[y] = np.frombuffer(prev, np.uint8)
    return pixels.reshape(height, width, bpp)[:, :, :3]


def test_headless_chromium_renders_the_plots(tmp_path: Path, sample: dict[str, Any]) -> None:
    browser = _chromium()
    if browser is None:
        pytest.skip("chromium not installed: apt-get install chromium to run the rendering check")
    report = write_report(sample, tmp_path / "report.html")
    page = report.read_text(encoding="utf-8")
    assert page.count("<svg") == len(_plots(page)) >= 5  # progress x2, pareto, b/v, ensembles
    png = tmp_path / "r.png"
    cmd = [
        browser,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}",
        f"--screenshot={png}",
        "--window-size=1280,4000",
        report.as_uri(),
    ]
    subprocess.run(cmd, capture_output=True, timeout=180, check=False, cwd=tmp_path)
    assert png.exists() and png.stat().st_size > 0, "chromium wrote no screenshot"
    image = _decode_png(png)
    assert image.shape == (4000, 1280, 3)
    colours = np.unique(image.reshape(-1, 3), axis=0)
    assert len(colours) > 200, "screenshot looks blank"
    assert (image.min(axis=2) < 200).mean() > 0.02, "almost no ink on the page"
    # Solid plot fills come out exactly in the palette's colours (Okabe–Ito blue, orange, green).
    for rgb in ((0x00, 0x72, 0xB2), (0xE6, 0x9F, 0x00), (0x00, 0x9E, 0x73)):
        assert (image == rgb).all(axis=2).sum() > 200, f"plot colour {rgb} missing"
