"""``hashaudit gate``: the TOML file, exit codes, and the baseline comparison."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_runner import run

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "sample_keys" / "crate_ids.txt"


def write_config(folder: Path, body: str) -> Path:
    path = folder / "hashaudit.toml"
    path.write_text(body, encoding="utf-8")
    return path


def test_a_known_weak_combination_fails_and_passes_without_it(tmp_path):
    code, out, err = run(["gate", "--config", str(ROOT / "examples" / "weak-combination.toml")])
    assert code == 1, err
    assert "identity" in out and "FAIL" in out
    weak = (ROOT / "examples" / "weak-combination.toml").read_text().replace('"identity", ', "")
    config = write_config(tmp_path, weak.replace("../sample_keys/", str(ROOT / "sample_keys") + "/"))
    code, out, err = run(["gate", "--config", str(config)])
    assert code == 0, (out, err)


@pytest.mark.parametrize(
    ("body", "words"),
    [
        ('hashes = ["xxh3_64"]\nbuckets = ["2^12"]\nhashs = ["x"]\n', "line 3: unknown key 'hashs'"),
        ('buckets = ["2^12"]\n[thresholds]\nmax_load = 1.2\n', "line 3: unknown key 'max_load' in [thresholds]"),
        (
            'buckets = ["2^12"]\n[[sources]]\npath = "k.txt"\ncolumn = "a"\n',
            "line 4: unknown key 'column' in [sources]",
        ),
        ('buckets = "2^12"\n', "line 1: buckets takes a list, not a string"),
        ("buckets = [\n", "not valid TOML"),
        ('buckets = ["2^12"]\n', "no [[sources]]"),
    ],
)
def test_mistakes_in_the_file_are_one_line_errors_with_the_line(tmp_path, body, words):
    (tmp_path / "k.txt").write_text("a\nb\n")
    config = write_config(tmp_path, body)
    code, out, err = run(["gate", "--config", str(config)])
    assert code == 2 and words in err and err.count("\n") == 1, err


def test_pyproject_table_and_relative_paths(tmp_path, monkeypatch):
    (tmp_path / "keys").mkdir()
    (tmp_path / "keys" / "k.txt").write_text("".join(f"key-{i}\n" for i in range(5000)))
    (tmp_path / "pyproject.toml").write_text(
        '[project]\nname = "x"\n\n[tool.hashaudit]\nhashes = ["xxh3_64"]\nbuckets = ["2^12"]\nchecks = ["buckets"]\n'
        '\n[[tool.hashaudit.sources]]\npath = "keys/k.txt"\n'
    )
    monkeypatch.chdir(tmp_path)
    code, out, err = run(["gate", "--json", "report.json"])
    assert code == 0, err
    assert json.loads((tmp_path / "report.json").read_text())["summary"]["keys"] == 5000


def test_a_regression_against_the_baseline_fails_even_when_every_check_passes(tmp_path):
    config = write_config(
        tmp_path,
        f'hashes = ["murmur3_32"]\nbuckets = ["2^14"]\nchecks = ["buckets"]\n[[sources]]\npath = "{SAMPLE}"\n'
        'key_format = "int"\n',
    )
    base = tmp_path / "base.json"
    assert run(["gate", "--config", str(config), "--json", str(base)])[0] == 0
    code, out, _ = run(["gate", "--config", str(config), "--baseline", str(base)])
    assert code == 0 and "0 regressed" in out  # the same input: nothing moved
    doc = json.loads(base.read_text())
    check = next(c for c in doc["hashes"][0]["checks"] if c["name"] == "chi_square")
    check["effect"]["value"] -= 0.2  # the baseline claimed a much smaller effect than today's
    base.write_text(json.dumps(doc))
    code, out, _ = run(["gate", "--config", str(config), "--baseline", str(base), "--json", str(tmp_path / "n.json")])
    assert code == 1 and "REGRESSED" in out and "chi_square" in out
    rows = json.loads((tmp_path / "n.json").read_text())["baseline"]["checks"]
    assert rows[0]["regressed"] and rows[0]["check"] == "chi_square" and rows[0]["new_verdict"] == "pass"
    code, _, err = run(["gate", "--config", str(config), "--baseline", str(tmp_path / "missing.json")])
    assert code == 2 and "no such file" in err


def test_a_database_source_in_the_file(tmp_path):
    config = write_config(
        tmp_path,
        'hashes = ["xxh3_64"]\nchecks = ["shards"]\nshards = [8]\n[[sources]]\n'
        f'path = "{ROOT / "sample_keys" / "tracking_lookups.sqlite"}"\n'
        'query = "SELECT parcel, bytes FROM lookups"\nweight = "bytes"\n',
    )
    code, out, err = run(["gate", "--config", str(config), "--json", str(tmp_path / "r.json")])
    assert code == 0, err
    doc = json.loads((tmp_path / "r.json").read_text())
    assert doc["sources"][0]["query"] == "SELECT parcel, bytes FROM lookups"
    hot = next(c for c in doc["hashes"][0]["checks"] if c["name"] == "hot_keys")
    assert hot["verdict"] == "info"
