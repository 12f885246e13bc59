"""Which checks an audit runs: check groups, their check names, and the parsing of ``--checks``."""

from __future__ import annotations

from hashaudit.errors import UsageError

CHECK_GROUPS: dict[str, tuple[str, ...]] = {
    "buckets": ("chi_square", "g_test", "empty_buckets", "colliding_pairs", "max_load"),
    "bits": ("bit_bias", "bit_correlation"),
    "collisions": ("full_collisions", "duplicate_keys"),
    "avalanche": ("avalanche", "bit_independence"),
    "neighbours": (
        "neighbour_counter",
        "neighbour_one_char",
        "neighbour_case",
        "neighbour_shared_prefix",
        "neighbour_appended_byte",
    ),
    "seeds": ("seed_spread", "seed_independent_collisions"),
    "tables": ("probe_cost",),
    "growth": ("growth_cost", "order_hazard"),
    "tags": ("tag_bits",),
    "shards": ("shard_balance", "shard_movement", "hot_keys", "load_attribution"),
}
DEFAULT_GROUPS: tuple[str, ...] = ("buckets", "bits", "collisions", "avalanche", "neighbours", "tables")
"""Every group but ``seeds``, which rehashes the key sample under several seeds and is asked for explicitly."""


def parse_checks(text: str | None) -> tuple[str, ...]:
    """Groups named by ``--checks``: a comma-separated list of groups or check names, or ``all``.

    A check name selects its whole group (the checks of a group share one pass). The order is canonical.
    """
    if text is None or not text.strip():
        return DEFAULT_GROUPS
    wanted: set[str] = set()
    for word in (w.strip() for w in text.split(",")):
        if not word:
            continue
        if word == "all":
            wanted.update(CHECK_GROUPS)
            continue
        group = next((g for g, names in CHECK_GROUPS.items() if word == g or word in names), None)
        if group is None:
            known = ", ".join([*CHECK_GROUPS, *(n for names in CHECK_GROUPS.values() for n in names)])
            raise UsageError(f"unknown check {word!r}; choose from: all, {known}")
        wanted.add(group)
    return tuple(g for g in CHECK_GROUPS if g in wanted)
