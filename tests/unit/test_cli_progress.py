"""The upload progress bar of ``tutti submit`` (written to stderr, chunk by chunk)."""

from __future__ import annotations

import io

from tuttiml.service.cli import BAR_MIN_BYTES, _upload_bar


def test_large_uploads_report_each_quarter_once_off_a_terminal() -> None:
    out = io.StringIO()
    show = _upload_bar(out)
    total = 8 * BAR_MIN_BYTES
    for done in range(0, total + 1, BAR_MIN_BYTES // 2):
        show(done, total)
    lines = out.getvalue().splitlines()
    assert len(lines) == 5  # 0, 25, 50, 75 and 100 %
    assert lines[-1].startswith("upload [" + "#" * 30 + "]")
    assert f"{total / 1e6:,.0f}/{total / 1e6:,.0f} MB" in lines[-1]


def test_small_uploads_print_nothing() -> None:
    out = io.StringIO()
    show = _upload_bar(out)
    show(1000, 1000)
    assert out.getvalue() == ""
