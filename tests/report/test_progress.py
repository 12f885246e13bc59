"""The progress line: drawn on a terminal only, with the share read and the time left when sizes are known."""

from __future__ import annotations

import io
from types import SimpleNamespace

from hashaudit.report.progress import ProgressLine


def test_share_rate_and_time_left_from_the_bytes_read():
    out = io.StringIO()
    line = ProgressLine(out, delay=0.0, interval=0.0)
    stats = SimpleNamespace(bytes_read=250)
    line.attach([SimpleNamespace(size_bytes=1000, stats=stats)])
    line.started -= 10.0  # ten seconds in
    line(5_000_000)
    text = out.getvalue()
    assert text.startswith("\r") and "5,000,000 keys read" in text and "0.5 M keys/s" in text
    assert "25 %" in text and "about 30 s left" in text  # a quarter in 10 s: 30 s to go
    line.close()
    assert out.getvalue().endswith("\r") and out.getvalue().rstrip("\r ").endswith("left")


def test_unknown_sizes_show_keys_only_and_short_runs_show_nothing():
    out = io.StringIO()
    line = ProgressLine(out, delay=0.0, interval=0.0)
    line.attach([SimpleNamespace(size_bytes=None, stats=SimpleNamespace(bytes_read=0))])
    line(10)
    assert "10 keys read" in out.getvalue() and "%" not in out.getvalue()
    quiet = io.StringIO()
    short = ProgressLine(quiet)  # the default waits a second before drawing
    short(10)
    short.close()
    assert quiet.getvalue() == ""
