"""The shapes of the check registry: :class:`Check`, :class:`CheckGroup`, and what a group is handed to conclude.

Light to import (no numpy): ``hashaudit --help`` reads the groups' settings from here.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

from hashaudit.settings import Setting

if TYPE_CHECKING:
    from hashaudit.stats.outcome import FitTest
    from hashaudit.verdict.findings import Finding

Tested = tuple[str | None, int | None, int, "FitTest"]
"""One test of one hash: (scheme, buckets, keys, test); the engine adds the hash's name."""

NULL_LAWS = ("uniform_p", "conservative_combined", "facts", "not_studied")
"""How a check's p-value behaves under the null, for the calibration study (``hashaudit.calibration``):
``uniform_p`` (one test's p-value, uniform or, for a discrete law, super-uniform), ``conservative_combined`` (k
times the smallest of k p-values: conservative by design), ``facts`` (no test: a fact about the input) and
``not_studied`` (outside the null audits: needs a planted input or a setting of the user's own)."""


@dataclass(frozen=True)
class Check:
    """One check: a name in the report, how its skewed finding reads, what it is for the calibration study.

    Parameters
    ----------
    name : str
        The check's name in every report (``chi_square``).
    sentence : callable, optional
        ``FitTest -> str``: the plain-language core of a skewed (worse than random) finding; the verdict rules add
        the p-value and, for a small effect, "significant but small".
    regular : callable, optional
        ``FitTest -> str``: the whole sentence of a too-regular finding, when the generic one does not fit.
    facts_only : bool
        A fact about the input (repeated keys, heavy keys), never a failure, not compared against a baseline.
    null_law : str
        One of :data:`NULL_LAWS`.
    help : str
        What the check looks at, in a line (``hashaudit audit --help``, the docs).
    rank : int
        Which of a table's findings speaks for it on one terminal line (lowest first).
    shows_keys : bool
        Its findings carry groups of keys sharing a value (``largest_groups``) that ``--show-keys`` names.
    figure : str, optional
        The HTML figure its findings feed: ``occupancy`` (the histogram of the worst table), ``probes`` (probe
        costs by load), ``shards`` (distinct keys and load per shard).
    """

    name: str
    sentence: Callable[[FitTest], str] | None = None
    regular: Callable[[FitTest], str] | None = None
    facts_only: bool = False
    null_law: str = "uniform_p"
    help: str = ""
    rank: int = 99
    shows_keys: bool = False
    figure: str | None = None


@dataclass(frozen=True)
class CheckGroup:
    """A group of checks that share one pass over the keys: everything the engines need to run them.

    Parameters
    ----------
    name : str
        The group's name (``--checks buckets``).
    help : str
        One line for ``--help``.
    checks : tuple of Check
    default : bool
        Run when ``--checks`` is not given.
    settings : tuple of Setting
        The group's options and thresholds (thresholds in the ``thresholds`` section).
    requires : str, optional
        A setting without which the group cannot run (``shards``): asked for alone, the group fails with a message;
        as part of a longer list (``all``), it is left out. Giving the setting turns the group on.
    when_alone : dict
        Values set when the group is asked for alone and ``requires`` is not given (``tag_bits`` = 7).
    accumulators : callable, optional
        ``(spec, plan, tables, lanes) -> {kind: (feeds, [accumulators])}``: per hash function, the accumulators
        the group needs, by kind; ``feeds`` says what they are fed (see ``hashaudit.engine.state.HashState``).
        Two groups asking for one kind share it.
    conclude : callable, optional
        ``(Conclusion, HashState) -> iterable of Tested``: the group's tests of fit for one hash function.
    facts : callable, optional
        ``(Conclusion) -> list of Finding``: findings that are facts about the input, after the verdicts.
    prepare : callable, optional
        ``(values: dict) -> None``: turns the group's raw settings into plan values (e.g. growth policies from text)
        and checks combinations, when a plan is built.
    before_read : callable, optional
        ``(plan, hash widths, tables) -> None``: refuses, before any key is read, what only the hash widths and
        table sizes tell (e.g. a tag layout that overlaps the position bits).
    needs_sample : bool
        Uses the bottom-k key sample (``hashaudit.stats.avalanche.KeySample``).
    needs_heavy : bool
        Uses the summary of the heaviest keys (``hashaudit.stats.heavy.HeavyKeys``).
    subjects : str
        What the group audits: ``hashes`` (the hash functions asked for) or ``placements`` (systems' placement
        rules, each a subject of its own; ``hashaudit.placements.rules``).
    warm_up : callable, optional
        ``(plan, sample: KeyBatch, widths, stand_in) -> None``: compiles the group's conclusion kernels through its
        statistics, hashing with ``stand_in(width)`` (numpy only), for the helper process of a first audit
        (``hashaudit.engine.warmup``); worth it for groups whose kernels take seconds to compile.
    """

    name: str
    help: str
    checks: tuple[Check, ...]
    default: bool = True
    settings: tuple[Setting, ...] = ()
    requires: str | None = None
    when_alone: dict = field(default_factory=dict)
    accumulators: Callable[..., dict[str, tuple[tuple[str, ...], list[Any]]]] | None = None
    conclude: Callable[[Conclusion, Any], Iterable[Tested]] | None = None
    facts: Callable[[Conclusion], list[Finding]] | None = None
    prepare: Callable[[dict], None] | None = None
    before_read: Callable[[Any, list[int], list[tuple[str, int]]], None] | None = None
    needs_sample: bool = False
    needs_heavy: bool = False
    subjects: str = "hashes"
    warm_up: Callable[[Any, Any, tuple[int, ...], Callable[[int], Any]], None] | None = None

    @property
    def check_names(self) -> tuple[str, ...]:
        """The names of the group's checks."""
        return tuple(c.name for c in self.checks)


@dataclass
class Conclusion:
    """What a group is handed to conclude: the plan, the merged accumulators of every hash and what they share.

    Attributes
    ----------
    plan : AuditPlan
    states : list of HashState
        One per hash function, in the plan's order.
    tables : list of (str, int)
        The (scheme, buckets) tables of the audit (empty when the ``buckets`` group does not run).
    keys, occurrences : int
        Keys the checks counted (distinct keys unless every occurrence counts) and occurrences read.
    sample : KeySample or None
        The key sample, when a group needs it.
    heavy : HeavyKeys or None
        The heaviest keys, when a group needs them.
    plots : dict
        Figure data by hash name, for the HTML page (groups add theirs).
    shared : dict
        Work shared by the hashes of one audit (e.g. neighbour key families), by a group's own key; fill it
        through ``once``, since groups may conclude on several threads at a time.
    figures : bool
        Whether the HTML page's figures are asked for: a group computes figure data only then (see ``plot``).
    """

    plan: Any
    states: list[Any]
    tables: list[tuple[str, int]]
    keys: int
    occurrences: int
    sample: Any = None
    heavy: Any = None
    plots: dict = field(default_factory=dict)
    shared: dict = field(default_factory=dict)
    figures: bool = True

    guard: threading.Lock = field(default_factory=threading.Lock, repr=False, compare=False)
    building: dict = field(default_factory=dict, repr=False, compare=False)

    def plot(self, hash_name: str, name: str, data: Any) -> None:
        """Keep figure data of one hash (when the figures are asked for)."""
        if self.figures:
            self.plots.setdefault(hash_name, {})[name] = data

    def once(self, key: Any, build: Callable[[], Any]) -> Any:
        """``shared[key]``, made by ``build()`` the first time it is asked for; a group concluding on another
        thread that asks meanwhile waits for that one build instead of making its own."""
        with self.guard:
            if key in self.shared:
                return self.shared[key]
            lock = self.building.setdefault(key, threading.Lock())
        with lock:
            if key not in self.shared:
                self.shared[key] = build()
            return self.shared[key]

    def for_one_group(self) -> Conclusion:
        """A view for one group's conclusion: the same accumulators, ``shared`` and ``once``, with figure data of
        its own (merged into ``plots`` by the engine in the groups' order, so the page does not depend on which
        group finished first)."""
        return replace(self, plots={})
