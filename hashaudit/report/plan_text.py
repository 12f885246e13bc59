"""The text ``hashaudit plan`` prints: what simple uniform hashing predicts, and the recommended table."""

from __future__ import annotations


def plan_text(d: dict) -> str:
    """The plan as lines of text (the JSON of ``hashaudit plan --json`` in words)."""
    probes = d["expected_probes"]

    def cell(v: float | None) -> str:
        return "∞" if v is None else f"{v:.3f}"

    rows = [
        f"keys {d['keys']:,} in {d['buckets']:,} buckets: load factor {d['load_factor']:.4g}",
        "  probability of no collision       "
        + (f"{d['p_no_collision']:.6g}" if d["p_no_collision"] > 0 else "below 1e-300"),
        f"  keys for even odds of a collision {d['keys_for_even_odds']:,}",
        f"  expected empty buckets            {d['expected_empty_buckets']:,.1f}",
        f"  expected colliding pairs          {d['expected_colliding_pairs']:,.1f}",
        f"  expected fullest bucket           {d['expected_max_load']:.2f} keys",
        "  expected probes per lookup         hit      miss",
    ]
    for kind in ("chaining", "linear", "quadratic", "double"):
        rows.append(f"    {kind:<31}{cell(probes[kind]['hit']):>8}  {cell(probes[kind]['miss']):>8}")
    advice = d.get("recommendation")
    if advice is not None:
        goal = advice["target"]
        limit = (
            ""
            if advice["max_load"] is None
            else f"; maximum load factor {advice['max_load']:.3f} ({advice['found_by']})"
        )
        rows += [
            "",
            f"recommendation for {goal['name']} = {goal['value']:g}, {advice['table_kind']} table: "
            f"{advice['slots']:,} slots (load {advice['load']:.3f}{limit})",
            "  probes per lookup       mean hit   p99 hit  mean miss  p99 miss",
        ]
        theory = advice["theory"]
        rows.append(f"    theory              {cell(theory['hit']):>9}  {'':>8}  {cell(theory['miss']):>9}")
        for label, sim in (("ideal hash (sim.)", advice["ideal"]), ("your keys (sim.)", advice["measured"])):
            if sim is not None:
                rows.append(
                    f"    {label:<20}{sim['hit_mean']:>9.3f}  {sim['hit_p99']:>8.0f}  {sim['miss_mean']:>9.3f}  "
                    f"{sim['miss_p99']:>8.0f}   ({sim['keys']:,} keys in {sim['slots']:,} slots)"
                )
    width = (advice or {}).get("hash_width") or d.get("hash_width")
    if width is not None:
        rows += [
            "",
            f"whole {width['bits']}-bit hash value: even odds of two keys sharing it at {width['keys_for_even_odds']:,} "
            "keys; probability that none of these keys share it "
            + (f"{width['p_no_full_collision']:.6g}" if width["p_no_full_collision"] > 0 else "below 1e-300"),
        ]
    return "\n".join(rows)
