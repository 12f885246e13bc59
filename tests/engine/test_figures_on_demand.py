"""The conclusion step computes the HTML page's figure data only when the page is asked for (not a timing test:
the figure computations are replaced by ones that fail loudly)."""

from __future__ import annotations

import json

import pytest

import hashaudit.stats.avalanche as avalanche_module
import hashaudit.stats.curves as curves_module
from tests.cli_runner import run


@pytest.fixture()
def no_figures(monkeypatch):  # type: ignore[no-untyped-def]
    def refuse(*args, **kwargs):  # type: ignore[no-untyped-def]
        raise AssertionError("a figure was computed although no HTML page was asked for")

    monkeypatch.setattr(curves_module, "no_collision_curve", refuse)
    monkeypatch.setattr(avalanche_module.AvalancheResult, "flip_probability", refuse)


@pytest.fixture()
def keys(tmp_path):  # type: ignore[no-untyped-def]
    path = tmp_path / "k.txt"
    path.write_bytes(b"".join(b"order-%07d\n" % i for i in range(20_000)))
    return path


def test_no_figure_without_the_html_page(no_figures, keys, tmp_path):
    report = tmp_path / "r.json"
    code, _, err = run(["audit", str(keys), "-H", "xxh3_64", "--json", str(report), "--markdown", "-", "-q"])
    assert code == 0, err
    assert json.loads(report.read_text())["hashes"][0]["checks"]


def test_the_html_page_gets_its_figures_and_the_json_is_the_same(keys, tmp_path):
    common = ["audit", str(keys), "-H", "xxh3_64", "-q"]
    assert run([*common, "--json", str(tmp_path / "a.json")])[0] == 0
    assert run([*common, "--json", str(tmp_path / "b.json"), "--html", str(tmp_path / "p.html")])[0] == 0
    a, b = (json.loads((tmp_path / n).read_text()) for n in ("a.json", "b.json"))
    a.pop("run"), b.pop("run")
    assert a == b
    page = (tmp_path / "p.html").read_text()
    assert "no collision" in page.lower() and "<svg" in page
