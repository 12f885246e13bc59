"""Calibration and power of the checks: many audits of an ideal hash, and audits of planted departures.

**Calibration.** Under simple uniform hashing the upper-tail p-value of a check whose null law is continuous
should be uniform on (0, 1); one whose law is discrete (Poisson counts, the maximum load, Monte Carlo nulls) or a
Bonferroni combination (``avalanche``, ``bit_independence``, ``probe_cost``) should be *super-uniform*:
P(p <= a) <= a for every a. And an audit, all of whose tests form one Holm family at ``alpha``, should report a
significant upper-tail departure (``warn`` or ``fail``) in at most a share ``alpha`` of null audits, and so fail in
at most that share. :func:`calibration` runs independent null audits — random distinct keys (byte strings or
64-bit integers), strong keyed functions under a seed drawn per audit (SipHash-2-4, XXH3, and SipHash truncated
to 32 bits so that full-width collisions happen at all), key counts drawn log-uniformly, one power-of-two table
(``mask``) and one prime table (``mod``) at load factors from 0.1 to 8, the same keys also under a few systems'
placement rules (``NULL_PLACEMENTS``) — and summarises every check's p-values.

**Power.** :func:`power` plants departures of known size (keys forced into a few buckets, weak low bits, a
biased output bit, an input bit that leaks linearly into an output bit, GF(2)-linear functions, a hash-tag family
pinned to one cluster slot, keys whose ``String.hashCode`` steps in strides of the partition count) at several
strengths and counts how often each check fails (or fails or warns). Strength 0 is the same construction with
nothing planted: its row is the false-detection rate of that setting.

Everything returns plain dicts (JSON-able) and is a pure function of its arguments and seeds: the same seed gives
the same numbers, whatever the number of worker processes.

Modules: :mod:`~hashaudit.calibration.checks` (every per-check table: null-law kind, groups, labels),
:mod:`~hashaudit.calibration.nulls` (null keys, null audits, p-values per check),
:mod:`~hashaudit.calibration.rates` (rates, bounds, uniformity), :mod:`~hashaudit.calibration.defects` (hash
functions with planted defects), :mod:`~hashaudit.calibration.departures` (power runs) and
:mod:`~hashaudit.calibration.full` (the whole study).

References
----------
A. N. Kolmogorov, "Sulla determinazione empirica di una legge di distribuzione", G. Ist. Ital. Attuari 4 (1933)
83-91; N. Smirnov, "Table for estimating the goodness of fit of empirical distributions", Ann. Math. Statist. 19
(1948) 279-281 (the one- and two-sided Kolmogorov-Smirnov tests).
C. J. Clopper, E. S. Pearson, "The use of confidence or fiducial limits illustrated in the case of the binomial",
Biometrika 26 (1934) 404-413.
S. Holm, "A simple sequentially rejective multiple test procedure", Scand. J. Statist. 6 (1979) 65-70.
A. F. Webster, S. E. Tavares, "On the design of S-boxes", CRYPTO '85, LNCS 218 (1986) 523-534 (avalanche).
"""

from __future__ import annotations

from hashaudit.calibration.checks import (
    BUCKET_LABELS,
    CHECK_ORDER,
    COMBINED_CHECKS,
    DISCRETE_WORDS,
    FACT_CHECKS,
    NULL_GROUPS,
    NULL_LAW,
    NULL_LAW_KINDS,
    NULL_PLACEMENTS,
    finding_label,
    law_kind,
    null_law,
)
from hashaudit.calibration.defects import biased_bit, leaky_input_bit, weak_low_bits, xor_rotations
from hashaudit.calibration.departures import (
    DEPARTURES,
    FORCED_BUCKETS,
    FORCED_TABLE,
    FULL_POWER_RUNS,
    Departure,
    power,
    power_run,
)
from hashaudit.calibration.full import PROBE_COST_KINDS, PROBE_COST_RUNS, PROBE_COST_SLOTS, STUDY_SEED, study
from hashaudit.calibration.nulls import (
    FULL_NULL_RUNS,
    KEY_BYTES,
    KEY_KINDS,
    NULL_HASHES,
    NULL_LOADS,
    TINY_KEY_COUNTS,
    calibration,
    null_configs,
    null_run,
    probe_cost_null,
    random_keys,
    rejudge,
    siphash24_low32,
    summarise_null_runs,
)
from hashaudit.calibration.rates import (
    CONFIDENCE,
    LEVELS,
    MIN_KS_RUNS,
    STUDY_ALPHA,
    clopper_pearson,
    judge_calibration,
    rate_summary,
    summarise_p_values,
)

__all__ = [
    "BUCKET_LABELS",
    "CHECK_ORDER",
    "COMBINED_CHECKS",
    "CONFIDENCE",
    "DEPARTURES",
    "DISCRETE_WORDS",
    "Departure",
    "FACT_CHECKS",
    "FORCED_BUCKETS",
    "FORCED_TABLE",
    "FULL_NULL_RUNS",
    "FULL_POWER_RUNS",
    "KEY_BYTES",
    "KEY_KINDS",
    "LEVELS",
    "MIN_KS_RUNS",
    "NULL_GROUPS",
    "NULL_HASHES",
    "NULL_LAW",
    "NULL_LAW_KINDS",
    "NULL_LOADS",
    "NULL_PLACEMENTS",
    "PROBE_COST_KINDS",
    "PROBE_COST_RUNS",
    "PROBE_COST_SLOTS",
    "STUDY_ALPHA",
    "STUDY_SEED",
    "TINY_KEY_COUNTS",
    "biased_bit",
    "calibration",
    "clopper_pearson",
    "finding_label",
    "judge_calibration",
    "law_kind",
    "leaky_input_bit",
    "null_configs",
    "null_law",
    "null_run",
    "power",
    "power_run",
    "probe_cost_null",
    "random_keys",
    "rate_summary",
    "rejudge",
    "siphash24_low32",
    "study",
    "summarise_null_runs",
    "summarise_p_values",
    "weak_low_bits",
    "xor_rotations",
]
