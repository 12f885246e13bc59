"""The shapes a test of fit returns: ``FitTest`` with its ``Effect`` (light to import: no scipy)."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Effect:
    """An effect size in operational units.

    Attributes
    ----------
    name : str
        ``lookup_cost_excess`` (relative extra probes per successful chained lookup), ``empty_excess``
        (extra empty buckets as a fraction of the table) or ``max_load_ratio`` (hottest bucket over the
        expected maximum).
    value : float
    observed, ideal : float
        The operational quantity for these keys and for an ideal hash (e.g. probes per lookup).
    unit : str
    """

    name: str
    value: float
    observed: float
    ideal: float
    unit: str


@dataclass(frozen=True)
class FitTest:
    """One test of fit on the counts of one table."""

    name: str
    statistic: float
    expected: float
    observed: float
    p_upper: float
    p_lower: float
    method: str
    effect: Effect
    details: dict = field(default_factory=dict)
