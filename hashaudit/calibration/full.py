"""The whole calibration and power study, from one seed: the run behind ``bench/validation.py``."""

from __future__ import annotations

import time

from hashaudit.calibration.departures import FULL_POWER_RUNS, power
from hashaudit.calibration.nulls import FULL_NULL_RUNS, calibration, probe_cost_null

STUDY_SEED = 20_240_917
PROBE_COST_SLOTS = (1 << 11, 1 << 12, 1 << 13, 1 << 14, 1 << 16)
PROBE_COST_KINDS = ("chaining", "linear", "robin-hood")
PROBE_COST_RUNS = 200


def study(
    *,
    null_runs: int = FULL_NULL_RUNS,
    power_runs: int = FULL_POWER_RUNS,
    probe_cost_runs: int = PROBE_COST_RUNS,
    seed: int = STUDY_SEED,
    workers: int = 1,
) -> dict:
    """The full calibration and power study: :func:`calibration` (keys 2,000 to 200,000, avalanche sample of 256
    keys), :func:`power` of every departure, and :func:`probe_cost_null` by table size."""
    started = time.perf_counter()
    null = calibration(null_runs, seed, workers=workers)
    detection = power(power_runs, seed, workers=workers)
    probe_started = time.perf_counter()
    probe_rows = probe_cost_null(PROBE_COST_SLOTS, PROBE_COST_KINDS, probe_cost_runs, seed)
    return {
        "calibration": null,
        "power": detection,
        "probe_cost_null": {"rows": probe_rows, "seconds": round(time.perf_counter() - probe_started, 2)},
        "seconds": round(time.perf_counter() - started, 2),
        "workers": workers,
    }
