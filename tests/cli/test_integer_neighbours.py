"""Integer keys (--key-format int) get integer neighbour families on the command line and in the gate, unless the
user says otherwise."""

from __future__ import annotations

import json
from pathlib import Path

from cli_runner import run

CRATES = Path(__file__).parents[2] / "sample_keys" / "crate_ids.txt"
ARGS = ["audit", str(CRATES), "--key-format", "int", "-H", "identity", "-m", "4096", "-s", "high", "-q"]


def _families(tmp_path: Path, *extra: str) -> tuple[str, dict[str, str]]:
    report = tmp_path / "r.json"
    code, _, err = run([*ARGS, "--checks", "buckets,neighbours", "--json", str(report), *extra])
    assert code in (0, 1), err
    doc = json.loads(report.read_text())
    checks = {c["name"]: c["verdict"] for c in doc["hashes"][0]["checks"] if c["name"].startswith("neighbour_")}
    return doc["settings"]["neighbour_keys"], checks


def test_integer_keys_get_integer_neighbours_and_identity_fails_them(tmp_path: Path) -> None:
    kind, checks = _families(tmp_path)
    assert kind == "integers"
    assert set(checks) == {"neighbour_adjacent", "neighbour_stride", "neighbour_bit_flip"}
    assert checks["neighbour_adjacent"] == "fail"  # x ± 1 share their top bits: one home slot in a high table


def test_asking_for_byte_neighbours_still_works(tmp_path: Path) -> None:
    kind, checks = _families(tmp_path, "--neighbour-keys", "bytes")
    assert kind == "bytes" and "neighbour_adjacent" not in checks


def test_the_gate_gives_integer_keys_integer_neighbours(tmp_path: Path) -> None:
    config = tmp_path / "hashaudit.toml"
    config.write_text(
        f'hashes = ["identity"]\nbuckets = [4096]\nschemes = ["high"]\nchecks = ["buckets", "neighbours"]\n'
        f'[reports]\njson = "r.json"\n[[sources]]\npath = "{CRATES}"\nkey_format = "int"\n'
    )
    code, _, err = run(["gate", "--config", str(config), "-q"])
    assert code in (0, 1), err
    assert json.loads((tmp_path / "r.json").read_text())["settings"]["neighbour_keys"] == "integers"
