"""Every per-check table of the calibration study, in one place.

The rest of ``hashaudit.calibration`` names no check: it looks check names up here. :data:`NULL_LAW` says, per
check, what kind of null law its p-value has, as the check registry declares it (``hashaudit.checks``):

``uniform_p``
    One test's upper-tail p-value: uniform on (0, 1) under simple uniform hashing when its null law is continuous,
    super-uniform (P(p <= a) <= a) when the law is discrete — Poisson counts, the multinomial maximum, a simulated
    null — which the finding's ``method`` tells (:data:`DISCRETE_WORDS`).
``conservative_combined``
    A Bonferroni combination of several p-values, p = k * min(p_i): super-uniform by design.
``facts``
    Not a test: no p-value under a null law and no part of the audit's Holm family, so the study leaves it out.

The group lists (:data:`NULL_GROUPS`, :data:`DEPARTURE_GROUPS`) name check groups as an ``AuditPlan`` takes them;
the label lists name check labels (:func:`finding_label`) as the study's tables report them.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

from hashaudit.checks import CHECKS, GROUP_BY_NAME

if TYPE_CHECKING:
    from hashaudit.verdict.findings import Finding

UNIFORM_P = "uniform_p"
CONSERVATIVE_COMBINED = "conservative_combined"
FACTS = "facts"
NULL_LAW_KINDS = (UNIFORM_P, CONSERVATIVE_COMBINED, FACTS)

# Each check declares its kind in the check registry; the registry's order is the row order of the tables.
NULL_LAW: dict[str, str] = {name: c.null_law for name, c in CHECKS.items() if c.null_law != "not_studied"}
# A check missing from NULL_LAW is read as one test whose method names its law: the study then still summarises
# it, where leaving it out would hide a new check from the calibration tables.
DEFAULT_NULL_LAW = UNIFORM_P

COMBINED_CHECKS = tuple(check for check, kind in NULL_LAW.items() if kind == CONSERVATIVE_COMBINED)
FACT_CHECKS = tuple(check for check, kind in NULL_LAW.items() if kind == FACTS)
CHECK_ORDER = tuple(check for check, kind in NULL_LAW.items() if kind != FACTS)

# How each combination is summed up in the "null law" column (its p-value is not one test's).
COMBINED_LAWS: dict[str, str] = {
    "avalanche": "aggregate chi-square and worst cell, Bonferroni",
    "bit_independence": "aggregate chi-square and worst cell, Bonferroni",
    "probe_cost": "Welch t on region means, Bonferroni over cells",
}
# Words of a method text whose null law is discrete, so that its p-values need only be super-uniform.
DISCRETE_WORDS = ("Poisson", "simulated", "multinomial maximum", "binomial test")

# Checks with one finding per bucketing scheme: their label adds the scheme (``chi_square mask``).
BUCKET_LABELS = GROUP_BY_NAME["buckets"].check_names
# Checks with one finding per simulated table kind: their label adds the kind (``probe_cost linear``), and the
# finding's ``slots`` detail names the table size behind its null law.
TABLE_LABELS = GROUP_BY_NAME["tables"].check_names
# Combined checks whose aggregate chi-square part (a continuous law) is summarised on its own, as
# ``<check> aggregate``, from the p-value in the given detail.
AGGREGATE_PARTS: dict[str, str] = {
    "avalanche": "chi_square_p_upper",
    "bit_independence": "chi_square_p_upper",
}
AGGREGATE_LAW = "chi-square with k degrees of freedom"
# Checks with one finding per system placement: their label adds the placement (``placement_balance
# kafka:partitions=6``).
PLACEMENT_LABELS = GROUP_BY_NAME["placement"].check_names
# A second audit family leaves these checks out, so that the audit-level rates read with and without the
# simulated tables (whose null is studied by table size on its own).
REJUDGED_WITHOUT = ("probe_cost",)
# A third family keeps only the placement checks: the false-failure rate of an audit of system placements alone.
PLACEMENT_FAMILY = "placement checks alone"

# Left out of the by-law calibration table: colliding_pairs shares chi_square's p-values (its statistic is an
# affine function of chi_square's), and probe_cost has a table of its own, by simulated table size.
BY_LAW_LEFT_OUT = ("colliding_pairs", "probe_cost")

# The check groups of every null audit.
NULL_GROUPS = ("buckets", "bits", "collisions", "avalanche", "tables", "placement")
# The system placements of every null audit: the broker's producer on a small and on a prime partition count, the
# cluster's 16,384 slots on 5 nodes (unequal slot ranges), and two rings — the wide-column store's random tokens,
# whose arcs differ by a factor of several, and ketama's 160 points per server. Their rules hash the key bytes
# with the system's own hash (murmur2, CRC16, MurmurHash3, MD5), not the study's seeded function: the null keys
# are i.i.d. uniform byte strings, so each value is an independent draw of that hash over uniform input — exactly
# uniform for CRC16 (a linear map onto its 16 bits) and murmur2 (each 4-byte block mixed by a bijection and XORed
# in), taken as uniform for MurmurHash3 and MD5 — and what the study calibrates is the rule's mapping to units
# (shares, growth, ring arcs) and the statistics on top of it.
NULL_PLACEMENTS = (
    "kafka:partitions=6",
    "kafka:partitions=31",
    "redis-cluster:nodes=5",
    "cassandra:nodes=8",
    "ketama:servers=5",
)

# Per planted departure: the check groups its audits run, and the check labels its power table reports.
DEPARTURE_GROUPS: dict[str, tuple[str, ...]] = {
    "forced_buckets": ("buckets",),
    "weak_low_bits": ("buckets", "tables"),
    "biased_bit": ("bits",),
    "leaky_input_bit": ("avalanche",),
    "linear": ("avalanche",),
    "tag_family": ("placement",),
    "key_stride": ("placement",),
}
# The placements of the planted placement departures.
TAG_FAMILY_PLACEMENT = "redis-cluster:nodes=6"
STRIDE_PLACEMENTS = ("jvm-hashcode-mod:n=16", "kafka:partitions=16")
DEPARTURE_LABELS: dict[str, tuple[str, ...]] = {
    "forced_buckets": tuple(f"{check} mask" for check in BUCKET_LABELS),
    "weak_low_bits": (
        "chi_square mask",
        "colliding_pairs mask",
        "empty_buckets mask",
        "max_load mask",
        "chi_square mod",
        "probe_cost chaining",
        "probe_cost linear",
    ),
    "biased_bit": ("bit_bias", "bit_correlation"),
    "leaky_input_bit": ("avalanche", "bit_independence"),
    "linear": ("avalanche", "bit_independence"),
    "tag_family": (f"placement_balance {TAG_FAMILY_PLACEMENT}", f"hash_tag_pinning {TAG_FAMILY_PLACEMENT}"),
    "key_stride": tuple(f"placement_balance {p}" for p in STRIDE_PLACEMENTS),
}


def law_kind(check: str) -> str:
    """The null-law kind of ``check`` (:data:`NULL_LAW`, else :data:`DEFAULT_NULL_LAW`)."""
    return NULL_LAW.get(check, DEFAULT_NULL_LAW)


def is_fact(check: str) -> bool:
    """Whether ``check`` reports a fact rather than a test (left out of the study and of Holm's family)."""
    return law_kind(check) == FACTS


def aggregate_label(check: str) -> str:
    """The label of the aggregate part of a combined check: ``avalanche aggregate``."""
    return f"{check} aggregate"


def finding_label(finding: Finding) -> str:
    """``chi_square mask``, ``probe_cost linear``, ``bit_bias``, ``placement_balance kafka:partitions=6``: a check
    and, where it has several, its table or placement."""
    if finding.check in PLACEMENT_LABELS:
        return f"{finding.check} {finding.hash_name}"
    if finding.check in TABLE_LABELS:
        return f"{finding.check} {finding.details.get('table_kind')}"
    if finding.scheme is not None and finding.check in BUCKET_LABELS:
        return f"{finding.check} {finding.scheme}"
    return finding.check


def null_law(check: str, method: str) -> tuple[str, str]:
    """A short name of the null law behind a p-value (numbers written ``k``), and its kind: ``continuous``,
    ``discrete`` or ``combined`` (a Bonferroni combination of several p-values: conservative by design)."""
    if law_kind(check) == CONSERVATIVE_COMBINED:
        return COMBINED_LAWS.get(check, "Bonferroni combination"), "combined"
    label = re.sub(r"\d+", "k", re.sub(r"\s*\([^)]*\)", "", method)).strip()
    return label, "discrete" if any(word in label for word in DISCRETE_WORDS) else "continuous"


def label_law_kind(label: str, law: str) -> str:
    """:func:`null_law`'s kind for a check label and the law name a null run recorded for it."""
    check = label.split(" ")[0]
    if label in (aggregate_label(c) for c in AGGREGATE_PARTS):
        return "continuous"
    return null_law(check, law)[1]


def label_order(label: str) -> tuple[int, str]:
    """Sort key of a check label: the order of :data:`CHECK_ORDER`, then unknown checks, then the label."""
    check = label.split(" ")[0]
    return (CHECK_ORDER.index(check) if check in CHECK_ORDER else len(CHECK_ORDER), label)
