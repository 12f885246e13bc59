"""Calibration and power study: prints Markdown tables and writes ``bench/data/validation.json``.

Runs :func:`hashaudit.calibration.study`: 2,000 independent null audits (random distinct keys, 2,000 to 200,000 of
them, through SipHash-2-4, XXH3 or SipHash truncated to 32 bits under a seed drawn per audit; one ``mask`` and one
``mod`` table at load factors 0.1 to 8; bucket, bit, full-width collision, avalanche and simulated-table checks,
and the same keys under five systems' placement rules), 40 audits per strength of the planted departures (among
them a hash-tag family and a key stride for the placement checks), and 200 null runs of ``probe_cost`` per table
size and kind. Everything derives from one seed; the numbers do not depend on ``--workers``.

Run time before the placement checks joined: 666 s (calibration 460 s, power 173 s, ``probe_cost`` by table size
33 s) on this machine's 2 cores with ``--workers 2``, measured while other jobs shared the cores; peak memory
0.5 GiB. With the placements, the null audits alone took 2,412 s on 2 shared cores (2026-12-03); the whole script
was not timed again. Usage:
``python bench/validation.py [--workers N] [--null-runs N] [--power-runs N] [--seed S]``, or
``--render bench/data/validation.json`` to print the tables of an earlier run.
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

from hashaudit import calibration
from hashaudit.calibration.checks import BY_LAW_LEFT_OUT

HERE = Path(__file__).parent


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %" if x < 0.995 or x == 1 else f"{100 * x:.2f} %"


def _p(p: float | None) -> str:
    if p is None:
        return "—"
    return f"{p:.3f}" if p >= 0.001 else f"{p:.1e}"


def _rate(level: dict) -> str:
    """``1.2 % (≤ 1.6)``: the observed rate and its one-sided 95 % Clopper-Pearson upper bound."""
    return f"{100 * level['rate']:.1f} % (≤ {100 * level['cp_upper']:.1f})"


def _verdict(rate: dict) -> str:
    """The one-sided exact binomial test of "rate <= bound": kept, or rejected (in bold)."""
    word = "kept" if rate["consistent"] else "**rejected**"
    return f"{word} (p = {_p(rate['p_excess'])})"


def _laws(laws: dict[str, int]) -> str:
    return "; ".join(f"{law} ({runs})" for law, runs in laws.items())


def calibration_tables(null: dict) -> str:
    """Per check, per null law where a check has several, and per audit."""
    out = [
        f"**Calibration** — {null['settings']['runs']:,} null audits, keys {null['settings']['min_keys']:,} to "
        f"{null['settings']['max_keys']:,}, seed {null['settings']['seed']} ({null['seconds']:.0f} s). Rates are "
        "P(p ≤ a) with the one-sided 95 % Clopper–Pearson upper bound; KS p: two-sided against uniform over the "
        "runs with a continuous null law / one-sided (alternative: too many small p-values) over all runs; status "
        "after Holm at 0.05 over every test of the table.",
        "",
        "| check | runs | KS p (two-sided) | KS p (too many small) | p ≤ 0.01 | p ≤ 0.05 | p ≤ 0.10 | p = 1 | status |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---|",
    ]
    for row in null["checks"]:
        s = row["summary"]
        levels = s["levels"]
        ks = _p(s["ks_p"]) + ("" if s["ks_runs"] in (0, row["runs"]) else f" ({s['ks_runs']})")
        out.append(
            f"| `{row['check']}` | {row['runs']:,} | {ks} | {_p(s['ks_excess_p'])} | {_rate(levels['0.01'])} | "
            f"{_rate(levels['0.05'])} | {_rate(levels['0.1'])} | {_pct(s['share_of_ones'])} | {row['status']} |"
        )
    out += [
        "",
        "**By null law** (the law a bucket check uses depends on the table size and load; `colliding_pairs` shares "
        "`chi_square`'s p-values, an affine function of it, and is left out; `probe_cost` by table size is below):",
        "",
        "| check | null law | runs | KS p (two-sided) | KS p (too many small) | p ≤ 0.01 | p ≤ 0.05 | status |",
        "|---|---|---:|---:|---:|---:|---:|---|",
    ]
    shown = [r for r in null["laws"] if not r["check"].startswith(BY_LAW_LEFT_OUT)]
    order = {check: i for i, check in enumerate(dict.fromkeys(r["check"] for r in shown))}
    for row in sorted(shown, key=lambda r: (order[r["check"]], -r["runs"])):
        s = row["summary"]
        out.append(
            f"| `{row['check']}` | {row['law']} | {row['runs']:,} | {_p(s['ks_p'])} | {_p(s['ks_excess_p'])} | "
            f"{_rate(s['levels']['0.01'])} | {_rate(s['levels']['0.05'])} | {row['status']} |"
        )
    audits = null["audits"]
    out += [
        "",
        f"**Audit level** — family-wise alpha {audits['alpha']}; an audit's rate must not be shown to exceed it "
        "(one-sided exact binomial test at 5 %, i.e. the 95 % Clopper–Pearson lower bound stays ≤ alpha):",
        "",
        "| checks | audits | failed | rate (95 % upper) | test of ≤ alpha | warn or fail | rate (95 % upper) | "
        "test of ≤ alpha | info | rate (95 % upper) |",
        "|---|---:|---:|---:|---|---:|---:|---|---:|---:|",
    ]
    for family, rates in audits.items():
        if family == "alpha":
            continue
        f, u, low = rates["fail"], rates["upper"], rates["lower"]
        out.append(
            f"| {family} | {f['runs']:,} | {f['count']} | {_rate(f)} | {_verdict(f)} | {u['count']} | {_rate(u)} | "
            f"{_verdict(u)} | {low['count']} | {_rate(low)} |"
        )
    return "\n".join(out)


def probe_cost_table(probe: dict) -> str:
    rows = probe["rows"]
    out = [
        f"**`probe_cost` under the null, by simulated table size** — {rows[0]['runs']} runs per cell, random 64-bit "
        f"values against the ideal simulation ({probe['seconds']:.0f} s):",
        "",
        "| slots | kind | p ≤ 0.01 | p ≤ 0.05 | KS p (too many small) | worst-cell excess > 0.1 |",
        "|---:|---|---:|---:|---:|---:|",
    ]
    for row in rows:
        s = row["summary"]
        out.append(
            f"| 2^{row['slots'].bit_length() - 1} | {row['kind']} | {_rate(s['levels']['0.01'])} | "
            f"{_rate(s['levels']['0.05'])} | {_p(s['ks_excess_p'])} | {_pct(row['effect_over_threshold'])} |"
        )
    return "\n".join(out)


def power_tables(detection: dict) -> str:
    out = [
        f"**Power** — {detection['settings']['runs']} audits per strength, seed {detection['settings']['seed']} "
        f"({detection['seconds']:.0f} s). Cells: failed / warned or failed, in % of the audits; strength 0 plants "
        "nothing (false detections of that setting).",
    ]
    for name, info in detection["departures"].items():
        rows = [r for r in detection["rows"] if r["departure"] == name]
        checks = list(dict.fromkeys(r["check"] for r in rows))
        out += [
            "",
            f"`{name}` — {info['description']}; strength: {info['strength']}.",
            "",
            "| strength | keys | runs | " + " | ".join(f"`{c}`" for c in checks) + " |",
            "|---|---:|---:|" + "---:|" * len(checks),
        ]
        for strength in dict.fromkeys(r["strength"] for r in rows):
            mine = {r["check"]: r for r in rows if r["strength"] == strength}
            first = mine[checks[0]]
            cells = [f"{100 * mine[c]['fail_rate']:.0f} / {100 * mine[c]['detection_rate']:.0f}" for c in checks]
            out.append(f"| {strength} | {first['keys']:,} | {first['runs']} | " + " | ".join(cells) + " |")
    return "\n".join(out)


def tables(result: dict) -> str:
    """Every table of a study, in Markdown."""
    parts = [
        calibration_tables(result["calibration"]),
        probe_cost_table(result["probe_cost_null"]),
        power_tables(result["power"]),
    ]
    return "\n\n".join(parts)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--null-runs", type=int, default=calibration.FULL_NULL_RUNS)
    parser.add_argument("--power-runs", type=int, default=calibration.FULL_POWER_RUNS)
    parser.add_argument("--probe-cost-runs", type=int, default=calibration.PROBE_COST_RUNS)
    parser.add_argument("--seed", type=int, default=calibration.STUDY_SEED)
    parser.add_argument("--out", type=Path, default=HERE / "data" / "validation.json")
    parser.add_argument("--render", type=Path, help="print the tables of a JSON written earlier; run nothing")
    args = parser.parse_args()
    if args.render is not None:
        print(tables(json.loads(args.render.read_text(encoding="utf-8"))))
        return
    started = time.perf_counter()
    result = calibration.study(
        null_runs=args.null_runs,
        power_runs=args.power_runs,
        probe_cost_runs=args.probe_cost_runs,
        seed=args.seed,
        workers=args.workers,
    )
    print(tables(result))
    seconds = time.perf_counter() - started
    print()
    print(f"total run time: {seconds:.0f} s with {args.workers} worker processes")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(result, indent=1, default=str) + "\n", encoding="utf-8")
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()
