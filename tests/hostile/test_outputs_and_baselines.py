"""Reports never replace an input or a special file, and baselines of the wrong shape are refused in one line
(each case a hostile tester tried; the input is compared byte for byte afterwards)."""

from __future__ import annotations

import json
import os
import sqlite3

import pytest

from tests.cli_runner import run


@pytest.fixture()
def place(tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    monkeypatch.chdir(tmp_path)
    (tmp_path / "k.txt").write_bytes(b"".join(b"key-%d\n" % i for i in range(500)))
    (tmp_path / "hashaudit.toml").write_text('seed = 0\nhashes = ["xxh3_64"]\n[[sources]]\npath = "k.txt"\n')
    db = sqlite3.connect(tmp_path / "keys.sqlite")
    db.execute("create table t (k text)")
    db.executemany("insert into t values (?)", [(f"key-{i}",) for i in range(200)])
    db.commit()
    db.close()
    return tmp_path


def _refused(args: list[str], *, words: str, kept: list) -> None:  # type: ignore[type-arg]
    before = {p: p.read_bytes() for p in kept}
    code, _, err = run(args)
    assert code == 2 and err.count("\n") == 1 and words in err, err
    assert {p: p.read_bytes() for p in kept} == before


def test_a_report_never_replaces_a_database_read_through_a_url(place):
    db = place / "keys.sqlite"
    for url in ("sqlite:///keys.sqlite", f"sqlite:///{db}"):
        _refused(["audit", "--db", url, "--query", "select k from t", "--json", "keys.sqlite"], words="an input",
                 kept=[db])  # fmt: skip


def test_a_report_never_replaces_the_gate_config_or_the_baseline(place):
    config = place / "hashaudit.toml"
    _refused(["gate", "--json", "hashaudit.toml"], words="an input", kept=[config])
    code, _, _ = run(["audit", "k.txt", "-H", "xxh3_64", "--json", "base.json", "-q"])
    assert code == 0
    _refused(["gate", "--baseline", "base.json", "--markdown", "base.json"], words="an input",
             kept=[place / "base.json", config])  # fmt: skip


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes here")
def test_special_files_and_links_are_not_replaced(place):
    (place / "old.json").write_text("{}")
    os.symlink(place / "old.json", place / "link.json")
    os.mkfifo(place / "pipe")
    for target in ("link.json", "pipe", "/dev/null"):
        _refused(["audit", "k.txt", "--json", target], words="not a regular file", kept=[place / "old.json"])
    assert (place / "link.json").is_symlink() and (place / "old.json").read_text() == "{}"


def test_dash_is_standard_output_for_one_report_only(place):
    code, out, _ = run(["audit", "k.txt", "-H", "xxh3_64", "--checks", "buckets", "--junit", "-", "-q"])
    assert code == 0 and out.startswith("<?xml") and not (place / "-").exists()
    _refused(["audit", "k.txt", "--json", "-", "--markdown", "-"], words="only one report", kept=[])
    _refused(["audit", "k.txt", "--json", "r.json", "--html", "./r.json"], words="also the path", kept=[])


def test_an_unwritable_place_is_refused_before_reading(place):
    _refused(["audit", "k.txt", "--json", "missing/r.json"], words="does not exist", kept=[])


@pytest.mark.parametrize(
    ("body", "words"),
    [
        ("{}", "no 'schema'"),
        ("[]", "not a JSON object"),
        ("null", "not a JSON object"),
        ("0", "not a JSON object"),
        ('""', "not a JSON object"),
        ('{"schema": "hashaudit.audit/1", "hashes": "x"}', "'hashes' is not a list"),
        ('{"schema": "hashaudit.audit/1", "hashes": [{"checks": []}]}', "hashes[0] has no name"),
        (
            '{"schema": "hashaudit.audit/1", "hashes": [{"name": "x", "checks": [{"name": "c", "verdict": "meh"}]}]}',
            "has no verdict",
        ),  # fmt: skip
        (
            '{"schema": "hashaudit.audit/1", "hashes": [{"name": "x", "checks": [{"name": "c", "verdict": "pass", '
            '"buckets": "2^16"}]}]}',
            "buckets is not an integer",
        ),  # fmt: skip
    ],
)
def test_baselines_of_the_wrong_shape_are_one_line_errors(place, body, words):
    (place / "b.json").write_text(body)
    _refused(["gate", "--baseline", "b.json"], words=words, kept=[place / "b.json"])


def test_a_device_as_baseline_is_refused_without_reading_it(place):
    _refused(["gate", "--baseline", "/dev/zero"], words="not a regular file", kept=[])


@pytest.mark.parametrize(
    ("line", "words"),
    [
        ('loads = ["x"]', "line 1: loads takes a number, not a string"),
        ('shards = ["a"]', "line 1: shards takes an integer, not a string"),
        ('shard_weights = ["x"]', "line 1: shard_weights takes a number, not a string"),
        ('schemes = [["mask"]]', "line 1: schemes takes one of mod, mask, high, range, not a list"),
        ('hashes = "xxh3_64"', "line 1: hashes takes a list, not a string"),
        ("seed = true", "line 1: seed takes an integer, not a boolean"),
        ("sources = 3", "'sources' must be a list of tables"),
        ("thresholds = 3", "'thresholds' must be a table"),
    ],
)
def test_config_values_of_the_wrong_type_are_one_line_errors(place, line, words):
    body = f'{line}\n[[sources]]\npath = "k.txt"\n' if "sources" not in line else f"{line}\n"
    (place / "hashaudit.toml").write_text(body)
    code, _, err = run(["gate"])
    assert code == 2 and err.count("\n") == 1 and words in err, err
    assert "internal error" not in err


def test_a_written_report_reads_back_as_a_baseline(place):
    code, _, _ = run(["audit", "k.txt", "-H", "xxh3_64", "--json", "base.json", "-q"])
    assert code == 0 and json.loads((place / "base.json").read_text())["schema"] == "hashaudit.audit/1"
    code, out, err = run(["gate", "--baseline", "base.json"])
    assert code == 0, err
    assert "against the baseline" in out
