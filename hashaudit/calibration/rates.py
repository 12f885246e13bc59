"""Rates and their bounds: how far a set of null p-values is from uniform, and whether a rate exceeds its bound.

References
----------
A. N. Kolmogorov, "Sulla determinazione empirica di una legge di distribuzione", G. Ist. Ital. Attuari 4 (1933)
83-91; N. Smirnov, "Table for estimating the goodness of fit of empirical distributions", Ann. Math. Statist. 19
(1948) 279-281 (the one- and two-sided Kolmogorov-Smirnov tests).
C. J. Clopper, E. S. Pearson, "The use of confidence or fiducial limits illustrated in the case of the binomial",
Biometrika 26 (1934) 404-413.
S. Holm, "A simple sequentially rejective multiple test procedure", Scand. J. Statist. 6 (1979) 65-70.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from hashaudit.verdict.holm import holm_adjust

LEVELS = (0.01, 0.05, 0.1)
CONFIDENCE = 0.95  # of the one-sided Clopper-Pearson bounds and of the excess tests
STUDY_ALPHA = 0.05  # family-wise level (Holm) at which the calibration table flags a check
MIN_KS_RUNS = 20


def clopper_pearson(count: int, runs: int, confidence: float = CONFIDENCE) -> tuple[float, float]:
    """One-sided Clopper-Pearson bounds ``(lower, upper)`` of a binomial rate, each at ``confidence``.

    References
    ----------
    C. J. Clopper, E. S. Pearson, Biometrika 26 (1934) 404-413.
    """
    from scipy import stats

    if runs <= 0:
        return 0.0, 1.0
    tail = 1.0 - confidence
    lower = 0.0 if count <= 0 else float(stats.beta.ppf(tail, count, runs - count + 1))
    upper = 1.0 if count >= runs else float(stats.beta.ppf(confidence, count + 1, runs - count))
    return lower, upper


def rate_summary(count: int, runs: int, rate: float, confidence: float = CONFIDENCE) -> dict[str, Any]:
    """``count`` events in ``runs`` against a largest acceptable ``rate``: the observed rate, its one-sided bounds,
    and the p-value of the one-sided exact binomial test of "true rate <= ``rate``" (small: too many events)."""
    from scipy import stats

    lower, upper = clopper_pearson(count, runs, confidence)
    p_excess = 1.0 if count <= 0 else float(stats.binom.sf(count - 1, runs, rate))
    return {
        "count": int(count),
        "runs": int(runs),
        "rate": count / runs if runs else math.nan,
        "bound": rate,
        "cp_lower": lower,
        "cp_upper": upper,
        "p_excess": p_excess,
        "consistent": p_excess > 1.0 - confidence,
    }


def summarise_p_values(
    p_values: Sequence[float], *, continuous: Sequence[bool] | bool, levels: Sequence[float] = LEVELS
) -> dict:
    """How far a set of null p-values is from uniform.

    Parameters
    ----------
    p_values : sequence of float
        Upper-tail p-values of one check over independent null runs.
    continuous : bool or sequence of bool
        Whether each p-value comes from a continuous null law (it should then be uniform); discrete laws and
        Bonferroni combinations need only be super-uniform.
    levels : sequence of float
        Levels a at which P(p <= a) is counted.

    Returns
    -------
    dict
        ``runs``; ``ks_runs`` and ``ks_p``: the two-sided Kolmogorov-Smirnov test against the uniform law over the
        p-values of continuous laws (None with fewer than ``MIN_KS_RUNS``); ``ks_excess_p``: the one-sided test
        over every p-value whose alternative is that their distribution function exceeds the uniform one
        somewhere — too many small p-values; it is valid for super-uniform laws too; ``share_of_ones``; and
        ``levels``: per level a, :func:`rate_summary` of the count of p <= a against a.

    References
    ----------
    Kolmogorov (1933); Smirnov (1948); Clopper & Pearson (1934).
    """
    from scipy import stats

    p = np.clip(np.asarray(p_values, dtype=np.float64), 0.0, 1.0)
    smooth = np.broadcast_to(np.asarray(continuous, dtype=bool), p.shape)
    out: dict[str, Any] = {
        "runs": len(p),
        "ks_runs": int(smooth.sum()),
        "ks_p": None,
        "ks_excess_p": None,
        "share_of_ones": None,
        "levels": {},
    }
    if len(p) == 0:
        return out
    out["share_of_ones"] = float(np.mean(p >= 1.0 - 1e-12))
    if smooth.sum() >= MIN_KS_RUNS:
        out["ks_p"] = float(stats.kstest(p[smooth], "uniform").pvalue)
    out["ks_excess_p"] = float(stats.kstest(p, "uniform", alternative="greater").pvalue)
    for a in levels:
        out["levels"][f"{a:g}"] = rate_summary(int(np.count_nonzero(p <= a)), len(p), a)
    return out


def judge_calibration(rows: list[dict], alpha: float = STUDY_ALPHA) -> list[dict]:
    """Give every summary row a ``status``, with Holm's procedure at ``alpha`` over every test of the table.

    ``too many small p-values``: the one-sided KS test or the excess test at some level rejects (the check is
    anti-conservative: it would flag good hashes too often). ``not uniform (conservative)``: the two-sided KS test
    of the continuous laws rejects while no excess test does. Otherwise ``uniform`` when every law of the row is
    continuous, ``valid`` when none is (discrete laws and combinations: super-uniform, as they should be), and
    ``uniform where continuous`` in between. The Holm-adjusted p-values are kept (``holm_excess``,
    ``holm_uniform``).
    """
    tests: list[tuple[int, str, float]] = []
    for i, row in enumerate(rows):
        summary = row["summary"]
        if summary["ks_excess_p"] is not None:
            tests.append((i, "excess", summary["ks_excess_p"]))
        for level in summary["levels"].values():
            tests.append((i, "excess", level["p_excess"]))
        if summary["ks_p"] is not None:
            tests.append((i, "uniform", summary["ks_p"]))
    adjusted = holm_adjust([p for *_, p in tests])
    for row in rows:
        row["holm_excess"] = row["holm_uniform"] = 1.0
    for (i, kind, _), adj in zip(tests, adjusted, strict=True):
        key = f"holm_{kind}"
        rows[i][key] = min(rows[i][key], float(adj))
    for row in rows:
        if row["holm_excess"] <= alpha:
            row["status"] = "too many small p-values"
        elif row["holm_uniform"] <= alpha:
            row["status"] = "not uniform (conservative)"
        elif row["summary"]["ks_runs"] == row["runs"]:
            row["status"] = "uniform"
        elif row["summary"]["ks_p"] is None:
            row["status"] = "valid"
        else:
            row["status"] = "uniform where continuous"
    return rows
