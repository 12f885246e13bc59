"""``AuditPlan``: what to audit, built from keywords named as the declared settings.

Every setting a plan holds is declared once: the audit's own in ``hashaudit.settings.AUDIT_SETTINGS``, each check
group's in its module under ``hashaudit.checks``. A plan takes them as keywords (``AuditPlan(hashes=("xxh3_64",),
buckets=(1 << 16,), shards=(8,))``), converts and checks each against its declaration, lets each group prepare its
own (growth policies from text, shard layouts), and writes them back as the JSON report's ``settings`` block.
"""

from __future__ import annotations

import os
from typing import Any

from hashaudit.checks import GROUP_BY_NAME, GROUPS, Thresholds, parse_checks, plan_settings
from hashaudit.engine.memory import share_memory
from hashaudit.errors import UsageError
from hashaudit.settings import SettingError

_MISSING = object()


class AuditPlan:
    """What to audit: hash functions, tables, check groups and their settings, thresholds.

    Parameters
    ----------
    **settings
        Any setting of ``hashaudit.checks.plan_settings()`` by name (``hashes``, ``buckets``, ``schemes``,
        ``seed``, ``all_keys``, ``memory``, ``distinct_memory``, ``checks``, ``spill_dir`` and every check group's options such
        as ``avalanche_keys``, ``table_kinds``, ``tag_bits``, ``shards``), plus ``thresholds`` (a
        :class:`~hashaudit.checks.Thresholds`). Values may be given as their text (``"2^16"``, ``"2@0.75"``) or
        already converted. A setting left out takes its declared default.

    Raises
    ------
    SettingError
        Naming the setting whose value cannot work.
    TypeError
        For a keyword that is not a setting.
    """

    __slots__ = ("_values",)
    _values: dict[str, Any]

    def __init__(self, **settings: Any) -> None:
        declared = plan_settings()
        unknown = sorted(set(settings) - set(declared) - {"thresholds"})
        if unknown:
            raise TypeError(f"AuditPlan got unknown settings {unknown}; known: {', '.join(declared)}")
        values: dict[str, Any] = {}
        for name, setting in declared.items():
            raw = settings.get(name, _MISSING)
            if raw is _MISSING or raw is None:
                values[name] = setting.default
            elif setting.kind == "text" and not setting.many and isinstance(raw, tuple):
                values[name] = setting.item(raw)  # already converted (a tag layout)
            else:
                values[name] = setting.value(list(raw) if isinstance(raw, tuple) else raw)
        thresholds = settings.get("thresholds")
        values["thresholds"] = thresholds if thresholds is not None else Thresholds()
        _resolve(values)
        object.__setattr__(self, "_values", values)

    def __getattr__(self, name: str) -> Any:
        try:
            return self._values[name]
        except KeyError:
            raise AttributeError(f"AuditPlan has no setting {name!r}") from None

    def __setattr__(self, name: str, value: Any) -> None:
        raise AttributeError("an AuditPlan is read-only; use replace()")

    def __eq__(self, other: object) -> bool:
        return isinstance(other, AuditPlan) and other._values == self._values

    def __hash__(self) -> int:
        return hash(tuple(self._values.items()))

    def __repr__(self) -> str:
        return "AuditPlan(" + ", ".join(f"{k}={v!r}" for k, v in self._values.items()) + ")"

    def __getstate__(self) -> dict:
        return dict(self._values)

    def __setstate__(self, state: dict) -> None:
        object.__setattr__(self, "_values", dict(state))

    def replace(self, **changes: Any) -> AuditPlan:
        """A plan with some settings changed."""
        return AuditPlan(**{**self._values, **changes})

    @property
    def distinct(self) -> bool:
        """Each distinct key counts once (the hash is not to blame for repeats)."""
        return not self.all_keys

    def settings_block(self) -> dict:
        """The JSON report's ``settings``: every recorded setting by name, then ``thresholds``."""
        declared = plan_settings()
        block = {name: s.to_json(self._values[name]) for name, s in declared.items() if s.recorded}
        if not any(g.subjects == "hashes" for g in self.groups()):
            block["hashes"] = []  # only placements ran: no hash function was audited
        block["thresholds"] = self.thresholds.as_dict()
        return block

    def tables(self, keys: int | None) -> list[tuple[str, int]]:
        """The (scheme, m) pairs to count; ``keys`` is needed when sizes are automatic."""
        from hashaudit.tables.schemes import is_power_of_two
        from hashaudit.tables.sizes import auto_sizes

        if "buckets" not in self.checks:
            return []
        if self.buckets:
            # a power-of-two-only scheme skips sizes another requested scheme can use (checked when built)
            sizes, primes = list(self.buckets), list[int]()
        else:
            if keys is None:
                raise SettingError("buckets", "must be given when the number of keys is not known beforehand")
            sizes, primes = auto_sizes(keys)
        pairs: list[tuple[str, int]] = []
        for m in sizes + primes:
            if self.schemes:
                for scheme in self.schemes:
                    if scheme in ("mask", "high") and not is_power_of_two(m):
                        continue  # automatic prime sizes only go to mod and range
                    pairs.append((scheme, m))
            else:
                pairs.append(("mask" if is_power_of_two(m) else "mod", m))
        return list(dict.fromkeys(pairs))

    def needs_key_count(self) -> bool:
        """True when table sizes depend on the number of keys."""
        return not self.buckets and "buckets" in self.checks

    def groups(self) -> list:
        """The check groups that run, in registry order."""
        return [g for g in GROUPS if g.name in self.checks]

    def subjects(self, registry: Any = None) -> list:
        """What the audit looks at: the hash functions (from ``registry``), then the placement rules; each only
        when a running check group audits its kind."""
        if registry is None:
            from hashaudit.hashes.registry import REGISTRY

            registry = REGISTRY
        kinds = {g.subjects for g in self.groups()}
        hashes = [registry.get(name) for name in self.hashes] if "hashes" in kinds else []
        return [*hashes, *(self.placements if "placements" in kinds else ())]


def _resolve(values: dict[str, Any]) -> None:
    """Defaults that depend on other settings, the groups' own preparation, and checks across settings."""
    from hashaudit.settings import DEFAULT_HASHES
    from hashaudit.tables.schemes import check_scheme, is_power_of_two

    values["hashes"] = tuple(dict.fromkeys(values["hashes"] or DEFAULT_HASHES))
    values["buckets"] = tuple(dict.fromkeys(values["buckets"]))
    values["schemes"] = tuple(dict.fromkeys(values["schemes"]))
    checks = values["checks"]
    groups = checks if isinstance(checks, tuple) and all(c in GROUP_BY_NAME for c in checks) else None
    groups = groups or parse_checks(checks)
    asked_alone = len(groups) == 1
    for group in GROUPS:  # giving a group's required setting turns the group on
        if group.requires and values[group.requires] and group.name not in groups:
            groups = (*groups, group.name)
    kept = []
    for name in groups:
        group = GROUP_BY_NAME[name]
        if group.requires and not values[group.requires]:
            if not asked_alone:
                continue  # e.g. from "all": the group needs a setting of the user's own
            if not group.when_alone:
                raise SettingError(group.requires, f"must be given for the {name} checks")
            values.update(group.when_alone)
        kept.append(name)
    values["checks"] = tuple(g.name for g in GROUPS if g.name in kept)
    if not values["checks"]:
        raise SettingError("checks", "names no check to run")
    for group in GROUPS:
        if group.prepare is not None:
            group.prepare(values)
    share_memory(values)
    if values["all_keys"] is False and values["distinct_memory"] < 4 << 20:
        raise SettingError("distinct_memory", f"must be at least 4 MiB, not {values['distinct_memory']:,} bytes")
    spill = values["spill_dir"]
    if spill is not None and not os.path.isdir(spill):
        raise SettingError("spill_dir", f"is not an existing folder: {spill!r}")
    for m in values["buckets"]:
        check_scheme("mod", m)
        usable = [s for s in values["schemes"] if s not in ("mask", "high") or is_power_of_two(m)]
        if values["schemes"] and not usable:
            check_scheme(values["schemes"][0], m)  # raises the one-line explanation
    if not values["hashes"]:
        raise UsageError("no hash function to audit")
