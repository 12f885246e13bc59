"""JSON Lines: 1 and "1" (true and "true") are not silently made one key."""

from __future__ import annotations

from pathlib import Path

import pytest

from hashaudit.errors import InputError
from hashaudit.keys import SourceOptions, open_keys
from hashaudit.settings import SettingError


def _keys(path: Path, **options: object) -> list[bytes]:
    return [k for batch in open_keys(path, SourceOptions(field="id", **options)) for k in batch.to_list()]  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("lines", "where"),
    [
        ('{"id": 1}\n{"id": 2}\n{"id": "1"}\n', "line 3: the field 'id' holds a string here and other values before"),
        ('{"id": "true"}\n\n{"id": true}\n', "line 3: the field 'id' holds a value that is not a string here"),
    ],
)
def test_a_field_mixing_strings_and_other_values_stops_by_default(tmp_path: Path, lines: str, where: str) -> None:
    path = tmp_path / "k.jsonl"
    path.write_text(lines)
    with pytest.raises(InputError) as caught:
        _keys(path)
    message = str(caught.value)
    assert where in message and "--json-values text" in message and "--json-values json" in message


def test_text_makes_them_one_key_and_json_two(tmp_path: Path) -> None:
    path = tmp_path / "k.jsonl"
    path.write_text('{"id": 1}\n{"id": "1"}\n{"id": true}\n{"id": "true"}\n{"id": "é"}\n{"id": [1, "a"]}\n')
    assert _keys(path, json_values="text") == [b"1", b"1", b"true", b"true", "é".encode(), b'[1,"a"]']
    assert _keys(path, json_values="json") == [b"1", b'"1"', b"true", b'"true"', '"é"'.encode(), b'[1,"a"]']


def test_one_kind_only_reads_as_before(tmp_path: Path) -> None:
    strings, numbers = tmp_path / "s.jsonl", tmp_path / "n.jsonl"
    strings.write_text('{"id": "a"}\n{"id": "1"}\n')
    numbers.write_text('{"id": 1}\n{"id": 2.5}\n{"id": false}\n')
    assert _keys(strings) == [b"a", b"1"]
    assert _keys(numbers) == [b"1", b"2.5", b"false"]


def test_an_unknown_choice_names_the_setting() -> None:
    with pytest.raises(SettingError) as caught:
        SourceOptions.from_settings(json_values="quoted")
    assert caught.value.setting == "json_values"


def test_a_key_format_reads_the_text_so_mixed_kinds_are_one_key(tmp_path: Path) -> None:
    path = tmp_path / "k.jsonl"
    path.write_text('{"id": 7}\n{"id": "7"}\n{"id": "8"}\n')
    assert _keys(path, key_format="int") == [(7).to_bytes(8, "little")] * 2 + [(8).to_bytes(8, "little")]
