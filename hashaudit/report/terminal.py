"""The terminal report: a ranked table, worst first, one line per table with the check that speaks for it and its
plain-language sentence, then the table's other findings that did not pass, named by verdict or counted, so that
every fail, warn and info is on the screen (``--all``: one line per check); then a line per hash function and, with
two or more, their ranking (``hashaudit.verdict.ranking``)."""

from __future__ import annotations

from collections import OrderedDict

import click

from hashaudit.checks import CHECKS
from hashaudit.settings import DEFAULT_HASHES
from hashaudit.verdict.findings import VERDICT_ORDER, Finding
from hashaudit.verdict.ranking import RankingRow
from hashaudit.verdict.result import AuditResult
from hashaudit.verdict.words import count, num

_COLOURS = {"fail": "red", "warn": "yellow", "info": "cyan", "pass": "green"}
HASH_FLOODING_NOTE = (
    "Note: these are statistics on these keys, not a security property. A non-cryptographic hash that passes\n"
    "every check can still be attacked with crafted keys (hash flooding); for keys an adversary controls, use\n"
    "a keyed hash with a secret seed (e.g. siphash24), as your security policy requires."
)


def _tag(verdict: str, colour: bool) -> str:
    text = f"{verdict.upper():<4}"
    return click.style(text, fg=_COLOURS[verdict], bold=verdict == "fail") if colour else text


def findings_by_table(findings: list[Finding]) -> list[tuple[str, list[Finding]]]:
    """Findings per (hash, table), each group led by its worst verdict, groups ranked worst first."""
    groups: OrderedDict[tuple[str, str], list[Finding]] = OrderedDict()
    for f in findings:
        groups.setdefault((f.hash_name, f.table), []).append(f)
    ranked = []
    for members in groups.values():
        worst = min(VERDICT_ORDER[f.verdict] for f in members)
        verdict = next(v for v, rank in VERDICT_ORDER.items() if rank == worst)
        ranked.append((verdict, members))
    ranked.sort(key=lambda item: (VERDICT_ORDER[item[0]], min(f.p_adjusted for f in item[1])))
    return ranked


TAIL_NAMES = 6  # checks a table's line names beside its own before it counts the rest


def speaking_finding(verdict: str, members: list[Finding]) -> Finding:
    """The finding that speaks for a table: of its worst verdict, the one in the most operational units (the
    registry's rank)."""
    return min((f for f in members if f.verdict == verdict), key=lambda f: CHECKS[f.check].rank)


def _tail(speaker: Finding, members: list[Finding]) -> tuple[str, int]:
    """The table's other findings that did not pass, named by verdict (``[also fail: g_test; warn: max_load]``),
    the ones past :data:`TAIL_NAMES` counted; and how many findings the tail stands for."""
    others = [f for f in members if f is not speaker and f.verdict != "pass"]
    parts, named = [], 0
    for verdict in ("fail", "warn", "info"):
        names = [f.check for f in others if f.verdict == verdict][: max(0, TAIL_NAMES - named)]
        named += len(names)
        if names:
            parts.append(f"{verdict}: {', '.join(names)}")
    rest = len(others) - named
    if rest:
        parts.append(f"and {rest} more: --all")
    return (f" [also {'; '.join(parts)}]" if parts else ""), len(others)


def _collision_keys(result: AuditResult, hash_name: str) -> list[str]:
    """Keys of the largest full-width collision groups, only present when the user asked for them."""
    out = []
    for f in result.findings:
        if f.hash_name != hash_name or not CHECKS[f.check].shows_keys or f.verdict == "pass":
            continue
        for group in f.details.get("largest_groups", [])[:3]:
            keys = group.get("sample_keys")
            if keys:
                shown = ", ".join(repr(k) for k in keys)
                out.append(f"        {group['hash']} is shared by {group['keys']:,} keys, e.g. {shown}")
    return out


RANKING_HEADER = (
    "#",
    "verdict",
    "hash",
    "extra probes/lookup",
    "hottest/expected",
    "failing groups",
    "keys/s",
    "ns/key",
)
RANKING_TITLE = "ranking, best first (by verdict, then the costs that checks found significant, then speed)"


def ranking_cells(row: RankingRow) -> tuple[str, str, str, str, str]:
    """A ranking row's cells as words: extra probes with their table, hottest ratio with its table, failing groups,
    keys per second and nanoseconds per key (``none`` where no check found a cost, ``not checked`` where none
    measured it, a dash for a speed not measured)."""
    probes = hottest = "not checked"
    if row.extra_probes is not None:
        extra = row.extra_probes.value
        probes = f"{'+' if extra >= 0 else '−'}{num(abs(extra))} ({row.extra_probes.table})"
    elif row.probes_checked:
        probes = "none"
    if row.hottest is not None:
        hottest = f"{num(row.hottest.value)}× ({row.hottest.table})"
    elif row.hottest_checked:
        hottest = "none"
    failing = ", ".join(row.failing_groups) or "—"
    speed = row.speed
    keys_per_second = num(speed.keys_per_second) if speed is not None else "—"
    ns_per_key = f"{speed.ns_per_key:#.3g}" if speed is not None else "—"
    return probes, hottest, failing, keys_per_second, ns_per_key


def speed_note(result: AuditResult) -> str:
    """Where the speeds come from, in a line (empty when none was measured)."""
    block = result.run.get("hash_speed") or {}
    if not block:
        return ""
    return (
        f"speed: each kernel alone on {count(block['keys'], 'sampled key', exact=True)} "
        f"({num(block['mean_key_bytes'])} bytes on average), best of {block['rounds']} rounds of "
        f"{num(1000 * block['seconds_per_round'])} ms;\na production implementation's speed may differ"
    )


def _ranking(result: AuditResult, colour: bool) -> list[str]:
    """The ranking table of two or more hash functions (nothing for fewer)."""
    ranking = result.ranking
    if not ranking:
        return []
    rows = [(str(i), row.verdict.upper(), row.hash_name, *ranking_cells(row)) for i, row in enumerate(ranking, 1)]
    widths = [max(len(cells[c]) for cells in [RANKING_HEADER, *rows]) for c in range(len(RANKING_HEADER))]
    right = {0, 6, 7}  # the position and the speeds line up on the right

    def line(cells: tuple[str, ...], verdict: str | None = None) -> str:
        out = []
        for c, (text, width) in enumerate(zip(cells, widths, strict=True)):
            padded = text.rjust(width) if c in right else text.ljust(width)
            if c == 1 and verdict is not None:
                padded = _tag(verdict, colour) + " " * (width - 4)
            out.append(padded)
        return "  " + "  ".join(out).rstrip()

    lines = [RANKING_TITLE + ":", line(RANKING_HEADER)]
    lines += [line(cells, row.verdict) for cells, row in zip(rows, ranking, strict=True)]
    note = speed_note(result)
    if note:
        lines += [f"  {part}" for part in note.splitlines()]
    else:
        lines.append("  speed: not measured (no check kept a key sample; the avalanche checks keep one)")
    return ["", *lines]


def render(result: AuditResult, *, show_all: bool = False, colour: bool = False) -> str:
    """The report as text: one line per (hash, table) that did not pass (every check with ``show_all``)."""
    lines = []
    counts = {v: 0 for v in ("fail", "warn", "info", "pass")}
    for f in result.findings:
        counts[f.verdict] += 1
    sources = ", ".join(str(s.get("source", "?")) for s in result.sources) or "(batches)"
    counted = count(result.keys, "key", exact=True)
    if result.repeated_keys:
        counted = (
            f"{count(result.keys_read, 'key', exact=True)} ({result.keys:,} distinct; the "
            f"{count(result.repeated_keys, 'repeat', exact=True)} {'is' if result.repeated_keys == 1 else 'are'} not "
            "counted against the hash)"
        )
    elif result.settings.get("all_keys"):
        counted = f"{count(result.keys, 'key', exact=True)} (every occurrence counted)"
    tables = len(result.tables)
    functions = sum(h.path != "placement" for h in result.hashes)
    placements = len(result.hashes) - functions
    subjects = []
    if functions:
        subjects.append(
            count(functions, "hash function")
            + (" (the default set)" if tuple(result.settings.get("hashes", ())) == DEFAULT_HASHES else "")
            + (f", {count(tables, 'table')} each" if tables else "")
        )
    if placements:
        subjects.append(count(placements, "system placement"))
    lines.append(f"hashaudit: {counted} from {sources}; {'; '.join(subjects)}")
    if result.sampled_keys_cut:
        from hashaudit.stats.sample import LONG_KEY_END_BYTES

        cut = result.sampled_keys_cut
        lines.append(
            f"note: {count(cut, 'sampled key', exact=True)} longer than {2 * LONG_KEY_END_BYTES:,} bytes "
            f"{'was' if cut == 1 else 'were'} cut to the first and last {LONG_KEY_END_BYTES:,} bytes for the "
            "avalanche, neighbour and seed checks"
        )
    lines.append(
        f"verdict: {_tag(result.verdict, colour).strip()}   "
        f"({counts['fail']} fail, {counts['warn']} warn, {counts['info']} info, {counts['pass']} pass; "
        f"family-wise alpha {result.settings['thresholds']['alpha']})"
    )
    lines.append("")
    rows: list[tuple[str, str, str, str, str]] = []
    folded = 0  # findings that did not pass, named or counted on another finding's line
    if show_all:
        for f in result.findings:
            rows.append((f.verdict, f.hash_name, f.table, f.check, f.message))
    else:
        for verdict, members in findings_by_table(result.findings):
            if verdict != "pass":
                speaker = speaking_finding(verdict, members)
                tail, more = _tail(speaker, members)
                folded += more
                rows.append((verdict, speaker.hash_name, speaker.table, speaker.check, speaker.message + tail))
    if rows:
        w_hash = max(len(r[1]) for r in rows)
        w_table = max(len(r[2]) for r in rows)
        w_check = max(len(r[3]) for r in rows)
        for verdict, hash_name, table, check, message in rows:
            lines.append(
                f"{_tag(verdict, colour)}  {hash_name:<{w_hash}}  {table:<{w_table}}  {check:<{w_check}}  {message}"
            )
            if table == "full value":
                lines.extend(_collision_keys(result, hash_name))
        if folded:
            flagged = len(rows) + folded
            lines.append(
                f"({count(len(rows), 'line')} above for {count(flagged, 'finding')} that did not pass: each line "
                "names its table's other findings in [also …]; --all gives every check its own line)"
            )
        lines.append("")
    for h in result.hashes:
        tally = {v: sum(1 for f in h.findings if f.verdict == v) for v in ("fail", "warn", "info", "pass")}
        spread = ", ".join(f"{count} {verdict}" for verdict, count in tally.items() if count)
        lines.append(f"  {_tag(h.verdict, colour)}  {h.name:<14} {h.width:>3}-bit  {h.path:<7}  checks: {spread}")
    lines.extend(_ranking(result, colour))
    lines.append("")
    lines.append(HASH_FLOODING_NOTE)
    return "\n".join(lines)
