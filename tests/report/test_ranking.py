"""The ranking of candidate hash functions: the order the audit's findings give, kernel speeds measured in the run
(in ``run``, so the result stays byte-identical), and the same table in every report format."""

from __future__ import annotations

import dataclasses
import html
import importlib.util
import json
import re
from pathlib import Path

import jsonschema
import pytest

from hashaudit import AuditPlan, audit
from hashaudit.checks import GROUP_BY_NAME, GROUPS
from hashaudit.keys.batch import KeyBatch
from hashaudit.report.html import render_html
from hashaudit.report.json_report import schema
from hashaudit.report.markdown import render_markdown
from hashaudit.report.terminal import render
from hashaudit.verdict import ranking
from hashaudit.verdict.ranking import HOTTEST_EFFECTS, PROBE_EFFECTS, PROBE_GROUPS, measure_speed, rank
from hashaudit.verdict.result import AuditResult, HashAudit
from tests.cli_runner import run

ROOT = Path(__file__).resolve().parents[2]
ORDERS = ROOT / "sample_keys" / "orders.txt"
CONTRACT = ROOT.parent / "shared" / "contract" / "check_report.py"
CANDIDATES = ("poly31", "crc32", "murmur3_32", "xxh3_64")
MARKUP = "<b>x&y</b>\"'"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """``hashaudit audit sample_keys/orders.txt -H poly31 -H crc32 -H murmur3_32 -H xxh3_64`` run twice, each
    writing the JSON, Markdown and HTML reports: (terminal output, JSON document, Markdown, HTML) per run."""
    out = []
    for i in range(2):
        folder = tmp_path_factory.mktemp(f"run{i}")
        args = ["audit", str(ORDERS), *(a for name in CANDIDATES for a in ("-H", name))]
        args += ["--json", str(folder / "r.json"), "--markdown", str(folder / "r.md"), "--html", str(folder / "r.html")]
        code, printed, err = run(args)
        assert code == 1, err  # poly31 and crc32 fail
        doc = json.loads((folder / "r.json").read_text())
        out.append((printed, doc, (folder / "r.md").read_text(), (folder / "r.html").read_text(), folder / "r.json"))
    return out


def test_the_verdicts_behind_the_ranking(runs):
    """What the ranking starts from, on these keys: the two strong functions pass, the two weak ones fail."""
    doc = runs[0][1]
    assert {h["name"]: h["verdict"] for h in doc["hashes"]} == {
        "poly31": "fail",
        "crc32": "fail",
        "murmur3_32": "pass",
        "xxh3_64": "pass",
    }


def test_strong_functions_first_then_the_cheaper_failure(runs):
    for _, doc, *_ in runs:
        order = doc["run"]["ranking_order"]
        assert set(order[:2]) == {"xxh3_64", "murmur3_32"} and order[2:] == ["crc32", "poly31"]
        rows = {row["hash"]: row for row in doc["ranking"]}
        # the failures are told apart by their worst significant lookup cost on the audited keys: poly31 keeps
        # the structure of the order numbers (hundreds of extra probes in a full open-addressing table), crc32
        # costs a fraction of a probe in a chained table
        poly, crc = rows["poly31"]["extra_probes"], rows["crc32"]["extra_probes"]
        assert poly["value"] > 100 and poly["check"] in ("probe_cost", "growth_cost") and "load" in poly["table"]
        assert 0 < crc["value"] < 1 and crc["verdict"] == "fail"
        for passing in ("xxh3_64", "murmur3_32"):
            assert rows[passing]["extra_probes"] is None and rows[passing]["failing_groups"] == []
            assert rows[passing]["probes_checked"] and rows[passing]["hottest_checked"]


def test_each_row_is_what_the_findings_say(runs):
    """Recomputed from the per-check entries of the same JSON document."""
    doc = runs[0][1]
    group_of = {c.name: g.name for g in GROUPS for c in g.checks}
    for entry in doc["hashes"]:
        row = next(r for r in doc["ranking"] if r["hash"] == entry["name"])
        failing = {group_of[c["name"]] for c in entry["checks"] if c["verdict"] == "fail"}
        assert row["failing_groups"] == [g.name for g in GROUPS if g.name in failing]
        significant = [c for c in entry["checks"] if c["verdict"] in ("fail", "warn")]
        probes = [
            c["effect"]["observed"] - c["effect"]["ideal"]
            for c in significant
            if c["effect"]["name"] in PROBE_EFFECTS and group_of[c["name"]] in PROBE_GROUPS
        ]
        assert (row["extra_probes"] or {}).get("value") == (max(probes) if probes else None)
        hottest = [c for c in significant if c["effect"]["name"] in HOTTEST_EFFECTS]
        assert (row["hottest"] is None) == (not hottest)
    assert set(PROBE_GROUPS) <= set(GROUP_BY_NAME)


def test_speeds_are_measured_and_positive(runs):
    for _, doc, *_ in runs:
        block = doc["run"]["hash_speed"]
        assert block["keys"] == 4096 and 5 < block["mean_key_bytes"] < 40  # the sample of orders.txt
        assert "may differ" in block["note"]
        assert set(block["hashes"]) == set(CANDIDATES)
        for speed in block["hashes"].values():
            assert speed["keys_per_second"] > 0 and speed["ns_per_key"] > 0 and speed["bytes_per_second"] > 0
            assert speed["keys_per_second"] * speed["ns_per_key"] == pytest.approx(1e9, rel=1e-3)
        # within a tie of verdict and costs, the faster kernel comes first
        first, second = doc["run"]["ranking_order"][:2]
        assert block["hashes"][first]["keys_per_second"] >= block["hashes"][second]["keys_per_second"]


def test_the_report_validates_and_keeps_the_contract(runs):
    validator = jsonschema.Draft202012Validator(schema())
    for _, doc, *_, path in runs:
        validator.validate(doc)
        if CONTRACT.exists():
            spec = importlib.util.spec_from_file_location("check_report", CONTRACT)
            assert spec is not None and spec.loader is not None
            contract = importlib.util.module_from_spec(spec)
            spec.loader.exec_module(contract)
            assert contract.main([str(path)]) == 0


def test_the_deterministic_part_is_identical_across_runs(runs):
    first, second = ({k: v for k, v in doc.items() if k != "run"} for _, doc, *_ in runs)
    assert "ranking" in first
    assert json.dumps(first, sort_keys=True) == json.dumps(second, sort_keys=True)


def _table_rows(text: str, header_start: str) -> list[list[str]]:
    lines = text.splitlines()
    start = next(i for i, line in enumerate(lines) if line.lstrip().startswith(header_start))
    rows = []
    for line in lines[start + 1 :]:
        if not re.match(r"\s*\|?\s*\d+\s", line):
            break
        rows.append(line)
    return [re.split(r"\s{2,}|\s*\|\s*", row.strip().strip("|").strip()) for row in rows]


def test_the_terminal_prints_the_table_after_the_per_hash_lines(runs):
    printed, doc = runs[0][0], runs[0][1]
    assert printed.index("  PASS  xxh3_64") < printed.index("ranking, best first")
    rows = _table_rows(printed, "#  verdict  hash")
    assert [row[2] for row in rows] == doc["run"]["ranking_order"]
    assert [row[1] for row in rows[:2]] == ["PASS", "PASS"] and [row[1] for row in rows[2:]] == ["FAIL", "FAIL"]
    for row in rows:
        keys_per_second, ns_per_key = row[-2], row[-1]
        assert re.fullmatch(r"[\d.]+ [MG]|[\d,]+", keys_per_second) and float(ns_per_key) > 0
    assert rows[0][3] == "none" and rows[3][3].startswith("+") and "load 0.9" in rows[3][3]
    assert "a production implementation's speed may differ" in printed


def test_markdown_summary_and_html_carry_the_same_order(runs):
    _, doc, markdown, page, _ = runs[0]
    order = doc["run"]["ranking_order"]
    section = markdown[markdown.index("### Ranking") :]
    names = [re.split(r"\s*\|\s*", line.strip("| "))[2].replace("\\_", "_") for line in section.splitlines()[4:8]]
    assert names == order
    assert "speed may differ" in section.split("###")[1]
    ranking_html = page[page.index('id="ranking"') : page.index("<h3>Worst findings</h3>")]
    assert re.findall(r"<td class='name'><code>(.*?)</code>", ranking_html) == order
    assert page.index('id="ranking"') < page.index('<section id="hashes">')  # near the top, in the summary


def test_names_are_escaped_in_every_format(poly_and_crc):
    """A hash named with markup (a plugin's name is the user's text) is escaped in the ranking of each format."""

    def renamed(audited: HashAudit) -> HashAudit:
        if audited.name != "crc32":
            return audited
        findings = tuple(dataclasses.replace(f, hash_name=MARKUP) for f in audited.findings)
        return dataclasses.replace(audited, name=MARKUP, findings=findings)

    speeds = dict(poly_and_crc.run["hash_speed"])
    speeds["hashes"] = {MARKUP if k == "crc32" else k: v for k, v in speeds["hashes"].items()}
    result = dataclasses.replace(
        poly_and_crc,
        hashes=tuple(renamed(h) for h in poly_and_crc.hashes),
        run={**poly_and_crc.run, "hash_speed": speeds},
    )
    assert [row.hash_name for row in result.ranking] == [MARKUP, "poly31"]
    page = render_html(result)
    assert MARKUP not in page
    ranking_html = page[page.index('id="ranking"') : page.index("<h3>Worst findings</h3>")]
    assert f"<code>{html.escape(MARKUP, quote=True)}</code>" in ranking_html
    markdown = render_markdown(result)
    assert "<b>" not in markdown and "&lt;b&gt;x&amp;y&lt;/b&gt;" in markdown
    assert MARKUP in render(result)  # the terminal prints text as it is


def test_one_hash_has_no_ranking_and_no_timing():
    result = audit([ORDERS], AuditPlan(hashes=("xxh3_64",), checks=("buckets", "avalanche")))
    doc = result.to_dict()
    assert result.ranking == [] and "ranking" not in doc and "hash_speed" not in doc["run"]
    assert "ranking" not in render(result) and "### Ranking" not in render_markdown(result)
    assert 'id="ranking"' not in render_html(result)


def test_without_a_key_sample_the_speed_is_not_measured():
    """The bucket checks keep no key sample: the ranking still orders by the findings, with no speed."""
    result = audit([ORDERS], AuditPlan(hashes=("poly31", "xxh3_64"), checks=("buckets",)))
    assert "hash_speed" not in result.run
    assert [(row.hash_name, row.speed) for row in result.ranking] == [("xxh3_64", None), ("poly31", None)]
    assert "speed: not measured" in render(result)


def test_placements_are_not_candidates():
    plan = AuditPlan(
        hashes=("xxh3_64", "murmur3_32"), checks=("buckets", "placement"), placements=("kafka:partitions=12",)
    )
    result = audit([ORDERS], plan)
    assert [h.path for h in result.hashes] == ["kernel", "kernel", "placement"]
    assert {row.hash_name for row in result.ranking} == {"xxh3_64", "murmur3_32"}
    assert set(result.run["hash_speed"]["hashes"]) == {"xxh3_64", "murmur3_32"}


def test_the_order_of_verdicts_and_costs(eight_hashes: AuditResult):
    """Over eight functions: verdicts never go from worse to better, and within a verdict costs never fall."""
    rows = eight_hashes.ranking
    assert len(rows) == 8
    keys = [row.deterministic_key() for row in rows]
    assert keys == sorted(keys)
    speeds_ok = all(row.speed is not None and row.speed.keys_per_second > 0 for row in rows)
    assert speeds_ok
    # the deterministic order in the JSON differs from the timed one only within ties
    doc = eight_hashes.to_dict()
    deterministic = [row["hash"] for row in doc["ranking"]]
    timed = doc["run"]["ranking_order"]
    by_name = {row.hash_name: row.deterministic_key() for row in rows}
    assert [by_name[n] for n in deterministic] == [by_name[n] for n in timed]


def test_a_round_repeats_until_its_time_and_the_best_round_counts():
    """A fake clock: the untimed first call and the first round take 0.5 s per call, the later rounds 0.125 s."""
    now = [0.0]
    calls = [0]

    def slow_then_fast(keys: KeyBatch, seed: int) -> None:
        calls[0] += 1
        now[0] += 0.5 if calls[0] <= 2 else 0.125

    keys = KeyBatch.from_keys([b"abcd"] * 1000)
    speed = measure_speed(slow_then_fast, keys, 0, seconds=0.5, rounds=3, clock=lambda: now[0])
    assert calls[0] == 1 + 1 + 4 + 4  # the first call, a round of one slow call, two rounds of four fast ones
    # the best round: 0.125 s per call of 1,000 keys of 4 bytes
    assert speed.ns_per_key == pytest.approx(0.125e9 / 1000)
    assert speed.keys_per_second == pytest.approx(8000)
    assert speed.bytes_per_second == pytest.approx(32_000)


def test_the_sample_is_repeated_for_a_vectorised_kernel_but_not_beyond_its_byte_budget(monkeypatch):
    seen: list[int] = []

    class Spec:
        name, seeded, path = "count", False, "kernel"

        @staticmethod
        def load():
            return lambda keys, seed: seen.append(len(keys))

    monkeypatch.setattr(ranking, "SPEED_SECONDS", 0.0)
    short = KeyBatch.from_keys([b"k%d" % i for i in range(4096)])
    block = ranking.measure_speeds([Spec()], short, 0)
    assert set(seen) == {ranking.SPEED_BATCH_KEYS} and block["keys"] == 4096
    seen.clear()
    long_keys = KeyBatch.from_keys([b"x" * (1 << 20)] * 16)  # 16 MiB: past the byte budget, hashed as sampled
    ranking.measure_speeds([Spec()], long_keys, 0)
    assert set(seen) == {16}


def test_rank_leaves_out_single_candidates():
    assert rank([]) == []
