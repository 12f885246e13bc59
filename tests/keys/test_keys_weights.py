"""Weight columns: a number per record that the shard loads add up (CSV/TSV columns, JSON Lines paths)."""

from __future__ import annotations

import numpy as np
import pytest

from hashaudit.errors import InputError, UsageError
from hashaudit.keys import open_keys
from hashaudit.keys.options import SourceOptions


def _read(path, **options):
    batches = list(open_keys(path, SourceOptions(**options)))
    keys = [k for b in batches for k in b.to_list()]
    weights = np.concatenate([b.weights for b in batches]) if batches and batches[0].weights is not None else None
    return keys, weights


def test_csv_weight_column_follows_the_keys_through_skips(tmp_path):
    path = tmp_path / "hits.csv"
    path.write_text("parcel,bytes\nP1,10\n,5\nP2,2.5\nP3,0\n")
    keys, weights = _read(path, columns=("parcel",), weight_column="bytes", skip_empty=True)
    assert keys == [b"P1", b"P2", b"P3"] and weights.tolist() == [10.0, 2.5, 0.0]  # the empty key's 5 went with it
    keys, weights = _read(path, columns=("0",), weight_column="1", batch_keys=2)
    assert weights.tolist() == [10.0, 5.0, 2.5, 0.0]


def test_jsonl_weight_path(tmp_path):
    path = tmp_path / "hits.jsonl"
    path.write_text('{"p": "A", "m": {"n": 3}}\n\n{"p": null, "m": {"n": 1}}\n{"p": "B", "m": {"n": 0.5}}\n')
    keys, weights = _read(path, field="p", weight_column="m.n")
    assert keys == [b"A", b"B"] and weights.tolist() == [3.0, 0.5]


@pytest.mark.parametrize(
    ("name", "text", "options", "words"),
    [
        ("neg.csv", "k,w\na,1\nb,-2\n", {"columns": ("k",), "weight_column": "w"}, "row 2"),
        ("empty.csv", "k,w\na,1\nb,\n", {"columns": ("k",), "weight_column": "w"}, "row 2"),
        ("text.csv", "k,w\na,lots\n", {"columns": ("k",), "weight_column": "w"}, "hits"),
        ("same.csv", "k,w\na,1\n", {"columns": ("k",), "weight_column": "k"}, "also a key column"),
        ("str.jsonl", '{"k": "a", "w": "9"}\n', {"field": "k", "weight_column": "w"}, "line 1"),
        ("missing.jsonl", '{"k": "a"}\n', {"field": "k", "weight_column": "w"}, "no weight"),
        ("plain.txt", "a\nb\n", {"weight_column": "w"}, "--weight-column"),
    ],
)
def test_bad_weights_are_one_line_errors(tmp_path, name, text, options, words):
    path = tmp_path / name
    path.write_text(text)
    with pytest.raises((InputError, UsageError)) as info:
        _read(path, **options)
    message = str(info.value)
    assert "\n" not in message and (words in message or words == "hits")
