"""hashaudit plan: a default target, and a recommendation that the user's own keys miss says so and exits 1."""

from __future__ import annotations

from pathlib import Path

from tests.cli_runner import run

SAMPLES = Path(__file__).parents[2] / "sample_keys"


def test_plan_of_a_file_alone_uses_the_default_target():
    code, out, err = run(["plan", str(SAMPLES / "orders.txt")])
    assert code == 0, err
    assert "recommendation for mean-hit = 2, linear table" in out


def test_a_recommendation_your_keys_miss_says_so_and_exits_1():
    # the crate ids are multiples of 4,096: the identity hash puts them all in a few slots of a power-of-two table
    code, out, _ = run(["plan", str(SAMPLES / "crate_ids.txt"), "--key-format", "int", "-H", "identity"])
    assert code == 1
    assert "your keys miss the target" in out
    code, out, _ = run(["plan", str(SAMPLES / "crate_ids.txt"), "--key-format", "int", "-H", "murmur3_32"])
    assert code == 0 and "miss the target" not in out


def test_plan_reads_a_database_and_lists_no_option_it_ignores(tmp_path):
    import sqlite3

    db = sqlite3.connect(tmp_path / "k.sqlite")
    db.execute("create table t (k text)")
    db.executemany("insert into t values (?)", [(f"key-{i}",) for i in range(5000)])
    db.commit()
    db.close()
    code, out, err = run(["plan", "--db", str(tmp_path / "k.sqlite"), "--query", "select k from t", "--load", "0.5"])
    assert code == 0, err
    assert "keys 5,000 in" in out
    code, out, _ = run(["plan", "--help"])
    assert "--weight-column" not in out and "--db-split-column" not in out and "--db URL" in out
