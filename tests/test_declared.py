"""Settings and checks declared once: the command line, the gate file, the JSON report and the schema all agree
with the declarations (hashaudit.settings, hashaudit.checks), and each face names a bad setting its own way."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from hashaudit.checks import CHECKS, GROUPS, Thresholds, plan_settings, threshold_settings
from hashaudit.cli import audit as audit_command
from hashaudit.cli_settings import SettingOption
from hashaudit.engine.plan import AuditPlan
from hashaudit.keys.batch import KeyBatch
from hashaudit.report.json_report import schema
from hashaudit.settings import SettingError
from tests.cli_runner import run

KEYS = [f"parcel-{i:06d}".encode() for i in range(3000)]


def _options() -> dict[str, SettingOption]:
    """The audit command's declared options by flag (every spelling, former ones included)."""
    out = {}
    for param in audit_command.params:
        if isinstance(param, SettingOption):
            for flag in param.opts + param.secondary_opts:
                out[flag] = param
    return out


@pytest.fixture(scope="module")
def settings_block() -> dict:
    from hashaudit.engine.runner import audit_batches

    plan = AuditPlan(hashes=("xxh3_64",), buckets=(1 << 10,), checks=("buckets",), shards=(4,), tag_bits="7")
    return audit_batches([KeyBatch.from_keys(KEYS)], plan, threads=1).settings


def test_every_settings_key_is_a_flag(settings_block):
    options = _options()
    for name in [*settings_block, *settings_block["thresholds"]]:
        if name == "thresholds":
            continue
        param = next((p for p in options.values() if p.name == name), None)
        assert param is not None, f"settings key {name!r} has no command-line option"
        flag = "--" + name.replace("_", "-")
        singular = param.setting.option  # a repeatable setting may take the singular (--hash for hashes)
        assert flag in options or (param.setting.repeatable and singular in options), (name, param.opts)


def test_every_threshold_flag_is_in_the_settings(settings_block):
    thresholds = {p.name for p in _options().values() if p.section == "thresholds"}
    assert thresholds == set(settings_block["thresholds"]) == set(threshold_settings())


def _toml_value(value: object) -> str:
    return json.dumps(value)  # JSON scalars and lists of them are valid TOML values


def test_every_settings_key_is_a_gate_key_and_round_trips(tmp_path, settings_block):
    """The settings block written back as a gate file gives the same plan (and the same settings block)."""
    from hashaudit.gate import load_config

    (tmp_path / "k.txt").write_text("a\nb\n")
    lines = [f"{k} = {_toml_value(v)}" for k, v in settings_block.items() if k != "thresholds" and v is not None]
    lines += ["[thresholds]", *(f"{k} = {v!r}" for k, v in settings_block["thresholds"].items())]
    lines += ["[[sources]]", 'path = "k.txt"']
    (tmp_path / "hashaudit.toml").write_text("\n".join(lines) + "\n")
    config = load_config(str(tmp_path / "hashaudit.toml"))
    assert config.plan.settings_block() == settings_block


def test_former_flags_still_work_and_are_hidden(tmp_path):
    keys = tmp_path / "k.txt"
    keys.write_bytes(b"".join(k + b"\n" for k in KEYS))
    report = tmp_path / "r.json"
    code, _, err = run(["audit", str(keys), "-H", "xxh3_64", "-m", "2^10", "--checks", "buckets",
                        "--max-cost-excess", "0.3", "--json", str(report), "-q"])  # fmt: skip
    assert code in (0, 1), err
    assert json.loads(report.read_text())["settings"]["thresholds"]["lookup_cost_excess"] == 0.3
    code, out, _ = run(["audit", "--help"])
    assert code == 0 and "--lookup-cost-excess" in out and "--max-cost-excess" not in out


def test_help_is_in_sections():
    code, out, _ = run(["audit", "--help"])
    titles = [line for line in out.splitlines() if line and not line.startswith(" ") and line.endswith(":")]
    assert titles[:6] == [
        "Sources: how records become keys:",
        "Hash functions and tables:",
        "Checks and their options:",
        "Thresholds: a significant departure fails above these effects:",
        "Reports:",
        "How the audit runs:",
    ]


def test_a_bad_setting_is_named_by_each_face(tmp_path):
    with pytest.raises(SettingError) as caught:
        AuditPlan(avalanche_keys=0)
    assert str(caught.value) == "avalanche_keys must be at least 1, not 0"  # the library names the setting
    keys = tmp_path / "k.txt"
    keys.write_text("a\nb\n")
    code, _, err = run(["audit", str(keys), "--avalanche-keys", "0"])
    assert code == 2 and err.strip() == "hashaudit: error: --avalanche-keys must be at least 1, not 0"
    (tmp_path / "hashaudit.toml").write_text('seed = 0\navalanche_keys = 0\n[[sources]]\npath = "k.txt"\n')
    code, _, err = run(["gate", "--config", str(tmp_path / "hashaudit.toml")])
    assert code == 2 and err.strip().endswith("hashaudit.toml line 2: avalanche_keys must be at least 1, not 0")


def test_thresholds_come_from_the_groups():
    assert Thresholds().as_dict() == {name: s.default for name, s in threshold_settings().items()}
    assert list(Thresholds().as_dict())[0] == "alpha"
    with pytest.raises(SettingError, match="not a threshold"):
        Thresholds(max_cost_excess=0.1)


def test_schema_enums_match_the_registry():
    document = schema()
    checks = document["$defs"]["check"]["properties"]["name"]["enum"]
    assert checks == list(CHECKS)
    settings = document["properties"]["settings"]
    assert settings["properties"]["checks"]["items"]["enum"] == [g.name for g in GROUPS]
    assert settings["properties"]["thresholds"]["required"] == list(threshold_settings())
    recorded = [name for name, s in plan_settings().items() if s.recorded]
    assert settings["required"] == [*recorded, "thresholds"]
    effects = document["$defs"]["check"]["properties"]["effect"]["properties"]["name"]["enum"]
    assert set(threshold_settings()) - {"alpha"} <= set(effects)


def test_light_declarations_repeat_no_constant_wrongly():
    """Group modules declare literal defaults so that --help loads no numerics; they must equal the kernels'."""
    from hashaudit.checks import shards, tables
    from hashaudit.tables import shards as shard_layouts
    from hashaudit.tables import simulate

    assert tables.TABLE_KINDS == simulate.TABLE_KINDS and tables.DEFAULT_LOADS == simulate.DEFAULT_LOADS
    assert shards.SHARD_SCHEMES == shard_layouts.SHARD_SCHEMES and shards.MAX_SHARDS == shard_layouts.MAX_SHARDS
    assert plan_settings()["vnodes"].default == shard_layouts.DEFAULT_VNODES


def test_report_options_are_the_writers():
    from hashaudit.report.writers import WRITERS

    reports = [p.name for p in audit_command.params if getattr(p, "section", None) == "reports"]
    assert reports[: len(WRITERS)] == list(WRITERS)


def test_help_loads_no_numerics():
    code = "import sys, hashaudit.cli; sys.exit(int(any(m in sys.modules for m in ('numpy', 'numba', 'scipy'))))"
    assert subprocess.run([sys.executable, "-c", code], check=False).returncode == 0


def test_every_check_has_a_sentence_or_is_facts_only():
    for check in CHECKS.values():
        assert check.facts_only or check.sentence is not None, check.name
        assert check.help, check.name
