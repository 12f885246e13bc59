"""The command line: exit codes, one-line errors, the report contract (click's CliRunner)."""

from __future__ import annotations

import gzip
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from cli_runner import run
from click.testing import CliRunner

from hashaudit.cli import cli

CONTRACT = Path(__file__).resolve().parents[3] / "shared" / "contract" / "check_report.py"


@pytest.fixture(scope="module")
def random_keys(tmp_path_factory) -> Path:
    rng = np.random.default_rng(424242)
    path = tmp_path_factory.mktemp("keys") / "random.txt"
    tokens = rng.integers(0, 2**63, size=30_000)
    path.write_text("".join(f"k{t:x}\n" for t in tokens.tolist()))
    return path


@pytest.fixture(scope="module")
def multiples_of_4096(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("keys") / "pages.txt"
    path.write_text("".join(f"{4096 * i}\n" for i in range(1, 20_001)))
    return path


def contract_problems(report: Path) -> str:
    if not CONTRACT.exists():
        pytest.skip("shared contract checker not found beside the project")
    proc = subprocess.run([sys.executable, str(CONTRACT), str(report)], capture_output=True, text=True)
    return proc.stdout + (f"exit {proc.returncode}" if proc.returncode else "")


def test_strong_functions_pass_on_random_keys(random_keys, tmp_path):
    report = tmp_path / "r.json"
    hashes = ["murmur3_32", "murmur3_128", "xxh64", "xxh3_64", "siphash24", "blake2b_64"]
    args = ["audit", str(random_keys), "--json", str(report)]
    for h in hashes:
        args += ["-H", h]
    code, out, err = run(args)
    assert code == 0, out + err
    doc = json.loads(report.read_text())
    assert doc["verdict"] == "pass"
    assert [h["name"] for h in doc["hashes"]] == hashes
    assert all(c["verdict"] in ("pass", "info") for h in doc["hashes"] for c in h["checks"])
    assert contract_problems(report) == ""


def test_planted_skew_fails_with_one_line_reason(multiples_of_4096, tmp_path):
    report = tmp_path / "r.json"
    code, out, err = run(
        [
            "audit",
            str(multiples_of_4096),
            "--key-format",
            "int",
            "-H",
            "identity",
            "-H",
            "murmur3_32",
            "-m",
            "4096",
            "-s",
            "mask",
            "--json",
            str(report),
        ]
    )
    assert code == 1, out + err
    fail_lines = [line for line in out.splitlines() if line.startswith("FAIL  identity")]
    table_line = next(line for line in fail_lines if "mask 2^12" in line)
    assert "colliding pairs" in table_line  # one line says why the table fails
    assert any("full value" in line for line in fail_lines)  # and the checks of the whole hash value fail too
    doc = json.loads(report.read_text())
    assert doc["verdict"] == "fail"
    verdicts = {h["name"]: h["verdict"] for h in doc["hashes"]}
    assert verdicts == {"identity": "fail", "murmur3_32": "pass"}
    max_load = next(c for c in doc["hashes"][0]["checks"] if c["name"] == "max_load")
    assert max_load["observed"] == 20_000  # every multiple of 4096 has low 12 bits zero: one bucket
    assert contract_problems(report) == ""


def test_json_report_is_deterministic_apart_from_run(random_keys, tmp_path):
    docs = []
    for i in range(2):
        report = tmp_path / f"r{i}.json"
        code, _, _ = run(["audit", str(random_keys), "-H", "fnv1a_64", "-m", "1000", "-q", "--json", str(report)])
        assert code in (0, 1)
        doc = json.loads(report.read_text())
        doc.pop("run")
        docs.append(json.dumps(doc, sort_keys=True))
    assert docs[0] == docs[1]


def write(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


BAD_INPUTS = {
    "missing file": (lambda p: ["audit", str(p / "nope.txt")], "nope.txt"),
    "empty file": (lambda p: ["audit", str(write(p, "empty.txt", b""))], "no keys"),
    "binary file": (lambda p: ["audit", str(write(p, "blob.txt", b"ab\x00cd\x01\x02\n" * 50))], "binary"),
    "invalid utf-8": (lambda p: ["audit", str(write(p, "latin.txt", b"ok\ncaf\xe9\n"))], "UTF-8"),
    "csv without column": (
        lambda p: ["audit", str(write(p, "t.csv", b"a,b\n1,2\n")), "--column", "user"],
        "user",
    ),
    "json line not json": (
        lambda p: ["audit", str(write(p, "e.jsonl", b'{"id": 1}\n{id: 2}\n')), "--field", "id"],
        "line 2",
    ),
    "buckets zero": (lambda p: ["audit", str(write(p, "k.txt", b"a\nb\n")), "--buckets", "0"], "buckets"),
    "mask not power of two": (
        lambda p: ["audit", str(write(p, "k.txt", b"a\nb\n")), "-m", "1000", "-s", "mask"],
        "power-of-two",
    ),
    "unknown hash": (lambda p: ["audit", str(write(p, "k.txt", b"a\nb\n")), "-H", "md77"], "md77"),
    "unknown scheme": (lambda p: ["audit", str(write(p, "k.txt", b"a\nb\n")), "-m", "8", "-s", "modulo"], "modulo"),
    "bad buckets text": (lambda p: ["audit", str(write(p, "k.txt", b"a\nb\n")), "-m", "lots"], "lots"),
    "truncated gzip": (
        lambda p: ["audit", str(write(p, "t.txt.gz", gzip.compress(b"a\nb\n" * 10_000)[:-30]))],
        "t.txt.gz",
    ),
    "stdin without buckets": (lambda p: ["audit", "-"], "--buckets"),
    "plan with both": (lambda p: ["plan", "--keys", "100", "--buckets", "10", "--load", "0.5"], "one of"),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_bad_input_exits_2_with_one_clear_line(case, tmp_path):
    make_args, fragment = BAD_INPUTS[case]
    code, out, err = run(make_args(tmp_path), stdin=b"a\nb\n")
    assert code == 2, (out, err)
    lines = [line for line in err.splitlines() if line.strip()]
    assert "Traceback" not in err
    assert fragment.lower() in err.lower(), err
    assert len(lines) <= 3, err  # click usage errors print a usage line and a hint; ours print one line


def test_debug_shows_the_traceback(tmp_path):
    code, _, err = run(["audit", str(tmp_path / "missing.txt"), "--debug"])
    assert code == 2 and "Traceback" in err


def test_report_never_overwrites_an_input(tmp_path):
    keys = write(tmp_path, "k.txt", b"a\nb\nc\n")
    code, _, err = run(["audit", str(keys), "-m", "4", "--json", str(keys)])
    assert code == 2 and "refusing" in err
    assert keys.read_bytes() == b"a\nb\nc\n"


def test_stdin_with_buckets(random_keys):
    code, out, err = run(["audit", "-", "-H", "xxh3_64", "-m", "2^12"], stdin=random_keys.read_bytes())
    assert code == 0, err
    assert "30,000 keys" in out


def test_plan_fields_and_birthday_value():
    code, out, _ = run(["plan", "--keys", "23", "--buckets", "365", "--json", "-"])
    assert code == 0
    doc = json.loads(out)
    # birthday problem, 23 people and 365 days: P(shared birthday) = 0.507297 (handbook value, e.g. Feller vol. 1 §II.3)
    assert doc["p_no_collision"] == pytest.approx(1 - 0.507297, abs=1e-6)
    assert doc["keys_for_even_odds"] == 23
    for field in ("expected_empty_buckets", "expected_colliding_pairs", "load_factor", "expected_probes"):
        assert field in doc
    assert set(doc["expected_probes"]) == {"chaining", "linear", "quadratic", "double"}
    assert set(doc["expected_probes"]["linear"]) == {"hit", "miss"}


def test_plan_from_load_factor_text():
    code, out, _ = run(["plan", "--keys", "1000000", "--load", "0.5"])
    assert code == 0
    assert "2,000,000 buckets" in out
    # linear probing at load 0.5: 1.5 probes per hit, 2.5 per miss (Knuth TAOCP vol. 3 §6.4)
    assert "1.500" in out and "2.500" in out


def test_hashes_lists_the_registry():
    result = CliRunner().invoke(cli, ["hashes", "--json"])
    assert result.exit_code == 0
    names = [h["name"] for h in json.loads(result.output)]
    for required in (
        "murmur3_32",
        "murmur3_128",
        "xxh32",
        "xxh64",
        "xxh3_64",
        "fnv1_32",
        "fnv1a_32",
        "fnv1_64",
        "fnv1a_64",
        "crc32",
        "crc32c",
        "siphash24",
        "poly31",
        "djb2",
        "sdbm",
        "identity",
        "fibonacci",
        "blake2b_64",
    ):
        assert required in names


def test_a_failed_report_write_leaves_no_temporary_file(tmp_path):
    keys = write(tmp_path, "k.txt", b"a\nb\nc\n")
    folder = tmp_path / "adir"
    folder.mkdir()
    code, _, err = run(["audit", str(keys), "-m", "4", "-q", "--json", str(folder)])
    assert code == 2 and "not a regular file" in err  # refused before the audit, nothing written
    assert sorted(p.name for p in tmp_path.iterdir()) == ["adir", "k.txt"]


def test_non_regular_file_needs_buckets(tmp_path):
    import os

    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    code, _, err = run(["audit", str(fifo)])
    assert code == 2 and "not a regular file" in err


@pytest.mark.parametrize("size", ["2^99999", "2^70", "1<<65"])
def test_absurd_table_sizes_are_usage_errors(size, tmp_path):
    code, _, err = run(["audit", str(write(tmp_path, "k.txt", b"a\n")), "-m", size])
    assert code == 2 and "internal error" not in err


def test_tables_that_cannot_fit_in_memory_are_refused(tmp_path):
    code, _, err = run(["audit", str(write(tmp_path, "k.txt", b"a\nb\n")), "-m", "2^32", "-H", "xxh3_64"])
    assert code == 2 and "GiB" in err


@pytest.mark.parametrize(
    ("option", "fragment"),
    [
        (["--avalanche-keys", "0"], "--avalanche-keys"),
        (["--avalanche-bytes", "0"], "--avalanche-bytes"),
        (["--spill-dir", "/no/such/folder"], "--spill-dir"),
        (["--checks", "entropy"], "unknown check"),
    ],
)
def test_deep_check_options_are_validated_before_reading(option, fragment, tmp_path):
    code, _, err = run(["audit", str(write(tmp_path, "k.txt", b"a\nb\n")), "-m", "4", *option])
    assert code == 2 and fragment in err


def test_keys_appear_only_with_show_keys(tmp_path):
    import itertools

    crafted = "".join("".join(blocks) + "\n" for blocks in itertools.product(["Aa", "BB"], repeat=6))
    keys = write(tmp_path, "crafted.txt", crafted.encode())
    report = tmp_path / "r.json"
    code, out, _ = run(["audit", str(keys), "-H", "poly31", "--checks", "collisions", "--json", str(report)])
    assert code == 1 and "AaAa" not in out and "AaAa" not in report.read_text()
    code, out, _ = run(
        ["audit", str(keys), "-H", "poly31", "--checks", "collisions", "--show-keys", "--json", str(report)]
    )
    assert code == 1 and "'AaAaAaAaAaAa'" in out
    group = json.loads(report.read_text())["hashes"][0]["checks"][0]["details"]["largest_groups"][0]
    assert group["keys"] == 64 and len(group["sample_keys"]) == 5
    assert all(set(k) <= set("AaB") for k in group["sample_keys"])


def test_a_file_with_more_distinct_keys_than_the_budget_is_read_in_parts(tmp_path):
    """``--distinct-memory 4m`` cannot hold 400,000 distinct keys' fingerprints: a file is read in several passes
    with the same results; standard input cannot be read again, so it stops with exit 2 and one line."""
    path = tmp_path / "many.txt"
    path.write_text("".join(f"order-{i}\n" for i in range(400_000)) + "order-7\n")
    base = ["audit", "-H", "xxh3_64", "-m", "2^16", "--checks", "buckets,collisions", "--json", "-"]
    code_one, one, _ = run([*base[:-1], str(tmp_path / "one.json"), str(path)])
    code_parts, _, _ = run([*base[:-1], str(tmp_path / "parts.json"), "--distinct-memory", "4m", str(path)])
    one_doc = json.loads((tmp_path / "one.json").read_text())
    parts_doc = json.loads((tmp_path / "parts.json").read_text())
    assert code_one == code_parts == 0
    assert parts_doc["run"]["passes"] >= 2 and one_doc["run"]["passes"] == 1
    assert parts_doc["hashes"] == one_doc["hashes"] and parts_doc["summary"]["repeated_keys"] == 1
    code, out, err = run(["audit", "-H", "xxh3_64", "-m", "2^16", "--distinct-memory", "4m", "-"], path.read_bytes())
    assert code == 2 and err.count("\n") == 1 and "--all-keys" in err and "several passes" in err


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (["--growth", "double"], "FACTOR@LOAD"),
        (["--growth", "2@1.2"], "between 0 and 1"),
        (["--load", "1.5"], "--load"),
        (["--table-slots", "100"], "--table-slots"),
        (["--tag-bits", "7x"], "--tag-bits"),
        (["--tag-bits", "8@0", "-m", "2^16", "-s", "mask"], "overlap"),
    ],
)
def test_table_options_refuse_bad_values_in_one_line(random_keys, args, words):
    code, out, err = run(["audit", str(random_keys), "-H", "xxh3_64", *args])
    assert code == 2 and err.count("\n") == 1 and words in err and "Traceback" not in err


def test_simulated_tables_growth_and_tags_reach_the_json(random_keys, tmp_path):
    report = tmp_path / "tables.json"
    code, _, _ = run(
        [
            "audit", str(random_keys), "-H", "xxh3_64", "--checks", "tables,growth", "--tag-bits", "7",
            "--table-kind", "linear", "--table-kind", "robin-hood", "--load", "0.5", "--load", "0.9",
            "--growth", "2@0.875", "--json", str(report),
        ]
    )  # fmt: skip
    doc = json.loads(report.read_text())
    checks = doc["hashes"][0]["checks"]
    kinds = {(c["name"], c.get("table_kind")) for c in checks}
    assert kinds == {("probe_cost", "linear"), ("probe_cost", "robin-hood"), ("growth_cost", "linear"),
                     ("growth_cost", "robin-hood"), ("order_hazard", "linear"), ("order_hazard", "robin-hood"),
                     ("tag_bits", None)}  # fmt: skip
    probe = next(c for c in checks if c["name"] == "probe_cost")
    assert [row["load"] for row in probe["details"]["loads"]] == [0.5, 0.9]
    assert probe["buckets"] == 1 << 15 and probe["load"] in (0.5, 0.9)  # 30,000 keys fill 2^15 slots to 0.9
    growth = next(c for c in checks if c["name"] == "growth_cost")
    assert growth["details"]["growth"]["policy"] == "2@0.875"
    assert code in (0, 1)
    if CONTRACT.exists():
        import subprocess

        assert subprocess.run([sys.executable, str(CONTRACT), str(report)], capture_output=True).returncode == 0


def test_plan_command_with_a_source(tmp_path):
    keys = tmp_path / "keys.txt"
    keys.write_text("".join(f"crate-{i:06d}\n" for i in range(50_000)) + "crate-000001\n")
    code, out, err = run(
        ["plan", str(keys), "-H", "murmur3_32", "--target", "p99-miss=20", "--json", str(tmp_path / "p.json")]
    )
    assert code == 0, err
    doc = json.loads((tmp_path / "p.json").read_text())
    advice = doc["recommendation"]
    assert advice["keys"] == doc["keys"] == 50_000  # distinct keys: the repeat counts once
    assert advice["measured"] is not None and advice["hash_width"]["bits"] == 32
    assert "your keys (sim.)" in out and "recommendation for p99-miss = 20" in out
    code, _, err = run(["plan", "--target", "mean-miss=4"])
    assert code == 2 and "--keys" in err
    code, _, err = run(["plan", "--keys", "100", "--target", "mean-miss=4", "--load", "0.5"])
    assert code == 2 and "not both" in err


def test_shards_on_the_sample_lookups_blame_the_hot_parcel_not_the_hash(tmp_path):
    """The sample tracking lookups: one parcel carries most of the bytes; hot_keys says so, shard_balance passes;
    the berth slots (steps of 64) fail shard_balance under identity + mod and leave hot_keys quiet."""
    sample = Path(__file__).resolve().parents[2] / "sample_keys" / "tracking_lookups.csv"
    report = tmp_path / "shards.json"
    code, out, err = run(
        ["audit", str(sample), "-c", "parcel", "--weight-column", "bytes", "--shards", "8", "--shard-scheme", "jump",
         "-H", "xxh3_64", "--checks", "shards", "--json", str(report)]
    )  # fmt: skip
    assert code == 0, err
    checks = {c["name"]: c for c in json.loads(report.read_text())["hashes"][0]["checks"]}
    assert checks["hot_keys"]["verdict"] == "info" and checks["shard_balance"]["verdict"] == "pass"
    assert checks["hot_keys"]["shards"] == 8 and checks["hot_keys"]["shard_scheme"] == "jump"
    assert checks["load_attribution"]["details"]["load_share"] > 0.8
    assert "MF-P-" not in out and "MF-P-" not in report.read_text()  # keys stay out of reports
    code, out, err = run(
        ["audit", str(sample), "-c", "berth_slot", "--key-format", "int", "-H", "identity", "--shards", "8",
         "--checks", "shards", "--json", str(report)]
    )  # fmt: skip
    assert code == 1
    checks = {c["name"]: c for c in json.loads(report.read_text())["hashes"][0]["checks"]}
    assert checks["shard_balance"]["verdict"] == "fail" and checks["hot_keys"]["verdict"] == "pass"
    code, _, err = run(["audit", str(sample), "-c", "parcel", "--shards", "4", "--shard-weights", "1,x,1,1"])
    assert code == 2 and "--shard-weights" in err
