"""Settings declared once: name, type, range, choices, default and help of every option hashaudit takes.

A :class:`Setting` is the one place a setting is described. The command-line flag (``--lookup-cost-excess``), the
TOML key of ``hashaudit gate`` (``lookup_cost_excess``), the key of the JSON report's ``settings`` block and the
wording of every error come from it: one name everywhere, dashes on the command line, underscores elsewhere. A
repeatable setting may have a singular flag (``--hash`` for ``hashes``).

Where settings are declared:

- the audit's own (hash functions, tables, seed, memory) and the family-wise ``alpha``: :data:`AUDIT_SETTINGS`,
- each check group's options and thresholds: the group's module in ``hashaudit.checks``,
- how a source's records become keys: ``hashaudit.keys.options.SOURCE_SETTINGS``,
- report outputs: ``hashaudit.report.writers``; how the audit runs: :data:`RUN_SETTINGS`.

This module imports nothing heavy (no numpy): ``hashaudit --help`` builds its options from it.

The library raises :class:`SettingError` naming the setting (``avalanche_keys must be at least 1, not 0``); the
command line says the flag (``--avalanche-keys must be …``), the gate the TOML key and its line.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Any

from hashaudit.errors import UsageError

SECTIONS = {
    "sources": "Sources: how records become keys",
    "hashes": "Hash functions and tables",
    "checks": "Checks and their options",
    "thresholds": "Thresholds: a significant departure fails above these effects",
    "reports": "Reports",
    "run": "How the audit runs",
}
"""Help sections, in the order ``--help`` shows them."""

KINDS = ("str", "int", "float", "bool", "size", "choice", "text")


class SettingError(UsageError):
    """A setting with a value that cannot work.

    ``reason`` may name other settings as ``{name}``; each face spells them its own way (a flag, a TOML key).
    ``str()`` gives the library's wording: ``name reason`` with bare setting names.
    """

    def __init__(self, setting: str, reason: str) -> None:
        self.setting = setting
        self.reason = reason
        super().__init__(self.worded(lambda name: name))

    def worded(self, spell: Callable[[str], str]) -> str:
        """The message with every setting name spelled by ``spell`` (e.g. as a flag); ``{name}`` is replaced only
        for a declared setting, so a value quoted in the reason is left as it is."""
        known = declared_names()
        reason = re.sub(r"\{([a-z][a-z_]*)\}", lambda m: spell(m[1]) if m[1] in known else m[0], self.reason)
        return f"{spell(self.setting)} {reason}" if not reason.startswith(":") else f"{spell(self.setting)}{reason}"


_DECLARED: set[str] = set()
"""The name of every setting declared so far (each declaration adds its own; no module is imported for it)."""


def declared_names() -> frozenset[str]:
    """The name of every declared setting."""
    return frozenset(_DECLARED)


def parse_size(value: object) -> int:
    """A size written ``65536``, ``2^16``, ``1<<16`` or ``64k``/``1m``/``1g`` (binary multiples)."""
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    text = str(value).strip().lower().replace("_", "")
    if m := re.fullmatch(r"(?:2\^|1<<)(\d{1,4})", text):
        if int(m.group(1)) > 64:
            raise UsageError(f"{value!r} is far above any table size (at most 2^32)")
        return 1 << int(m.group(1))
    if m := re.fullmatch(r"(\d+)([kmg])", text):
        return int(m.group(1)) << {"k": 10, "m": 20, "g": 30}[m.group(2)]
    if re.fullmatch(r"\d+", text):
        return int(text)
    raise UsageError(f"{value!r} is not a table size (examples: 65536, 2^16, 64k)")


@dataclass(frozen=True)
class Setting:
    """One setting.

    Parameters
    ----------
    name : str
        Snake-case name: the TOML and JSON key; the flag is ``--`` plus the name with dashes (or ``flag``).
    section : str
        One of :data:`SECTIONS`.
    help : str
        One line for ``--help``.
    default : object
        The value when the setting is not given (for a repeatable setting, the tuple used when none is given).
    kind : str
        ``str``, ``int``, ``float``, ``bool``, ``size`` (``65536``, ``2^16``, ``64k``), ``choice`` or ``text``
        (a string turned into a value by ``parse``).
    parse : callable, optional
        For ``text`` settings: text to value; raises ``UsageError`` with the reason.
    show : callable, optional
        Value to its JSON form (default: the value; tuples become lists).
    choices : tuple of str
        The allowed values of a ``choice`` setting.
    minimum, maximum : float, optional
        Inclusive bounds (exclusive when ``open_range``).
    repeatable : bool
        A list of values: the flag is given once per value, TOML takes a list.
    comma_list : bool
        The flag takes one comma-separated list (``--shard-weights 1,2,3``).
    flag : str, optional
        The flag when it is not the name with dashes (a singular for repeatable settings).
    short : str, optional
        A one-letter flag (``-H``).
    aliases : tuple of str
        Former flags, still accepted and hidden from ``--help``.
    toml_aliases : tuple of str
        Former TOML keys, still accepted.
    metavar : str, optional
    recorded : bool
        Written into the JSON report's ``settings`` block (settings that change the result).
    negatable : bool
        A boolean flag with a ``--no-`` twin (``--header/--no-header``).
    """

    name: str
    section: str
    help: str
    default: Any = None
    kind: str = "str"
    parse: Callable[[str], Any] | None = None
    show: Callable[[Any], Any] | None = None
    choices: tuple[str, ...] = ()
    minimum: float | None = None
    maximum: float | None = None
    open_range: bool = False
    repeatable: bool = False
    comma_list: bool = False
    flag: str | None = None
    short: str | None = None
    aliases: tuple[str, ...] = ()
    toml_aliases: tuple[str, ...] = ()
    metavar: str | None = None
    recorded: bool = True
    negatable: bool = False

    def __post_init__(self) -> None:
        if self.section not in SECTIONS or self.kind not in KINDS:
            raise ValueError(f"setting {self.name}: bad section {self.section!r} or kind {self.kind!r}")
        _DECLARED.add(self.name)

    @property
    def option(self) -> str:
        """The command-line flag."""
        return self.flag or "--" + self.name.replace("_", "-")

    @property
    def many(self) -> bool:
        """The value is a tuple of items."""
        return self.repeatable or self.comma_list

    def value(self, raw: Any) -> Any:
        """``raw`` (text from the command line, or a TOML value) as this setting's value, checked.

        Raises
        ------
        SettingError
            Naming this setting and the reason.
        """
        if raw is None:
            return None
        if self.many:
            if self.comma_list and isinstance(raw, str):
                raw = [part for part in raw.split(",") if part.strip()] if raw.strip() else []
            if not isinstance(raw, list | tuple):
                raise SettingError(self.name, f"takes a list, not {_type_name(raw)}")
            return tuple(self.item(x) for x in raw)
        return self.item(raw)

    def item(self, raw: Any) -> Any:
        """One value (one item of a repeatable setting), converted and checked."""
        value = self._convert(raw)
        self.check(value)
        return value

    def check(self, value: Any) -> None:
        """Range and choices of one converted value."""
        if self.choices and value not in self.choices:
            raise SettingError(self.name, f"takes one of {', '.join(self.choices)}, not {value!r}")
        if isinstance(value, int | float) and not isinstance(value, bool):
            low, high = self.minimum, self.maximum
            if isinstance(value, float) and not math.isfinite(value):
                raise SettingError(self.name, f"must be a finite number, not {value}")
            outside = (low is not None and (value <= low if self.open_range else value < low)) or (
                high is not None and (value >= high if self.open_range else value > high)
            )
            if outside:
                raise SettingError(self.name, f"must be {self.range_text()}, not {_number(value)}")

    def range_text(self) -> str:
        """``between 1 and 4096``, ``at least 1``, ``between 0 and 1 (exclusive)``."""
        low, high = self.minimum, self.maximum
        if low is not None and high is not None:
            return f"between {_number(low)} and {_number(high)}" + (" (exclusive)" if self.open_range else "")
        if low is not None:
            return f"above {_number(low)}" if self.open_range else f"at least {_number(low)}"
        limit = _number(high if high is not None else math.inf)
        return f"below {limit}" if self.open_range else f"at most {limit}"

    def _convert(self, raw: Any) -> Any:
        kind = self.kind
        try:
            if kind == "bool":
                if isinstance(raw, bool):
                    return raw
                raise SettingError(self.name, f"takes true or false, not {_type_name(raw)}")
            if isinstance(raw, bool):
                raise SettingError(self.name, f"takes {_kind_words(self)}, not a boolean")
            if kind == "int":
                if isinstance(raw, str) and re.fullmatch(r"\s*[-+]?\d+\s*", raw):
                    return int(raw)
                if isinstance(raw, int):
                    return raw
            elif kind == "float":
                if isinstance(raw, int | float):
                    return float(raw)
                if isinstance(raw, str):
                    return float(raw)
            elif kind == "size":
                if isinstance(raw, int | str):
                    return parse_size(raw)
            elif kind == "text":
                assert self.parse is not None
                if not isinstance(raw, int | float | str | list | dict):
                    return raw  # already converted (a growth policy, a tag layout)
                if isinstance(raw, int | float | str):
                    return self.parse(str(raw))
            elif isinstance(raw, str):  # str, choice
                return raw
        except SettingError:
            raise
        except UsageError as exc:
            raise SettingError(self.name, _reason(str(exc), self)) from None
        except ValueError:
            pass
        raise SettingError(self.name, f"takes {_kind_words(self)}, not {_type_name(raw)}")

    def to_json(self, value: Any) -> Any:
        """The value as the JSON report's ``settings`` block shows it."""
        if self.show is not None:
            return self.show(value)
        return list(value) if isinstance(value, tuple) else value


def _number(x: float) -> str:
    if isinstance(x, float) and x.is_integer() and abs(x) < 1e15:
        return f"{int(x):,}" if abs(x) >= 10_000 else str(int(x))
    return f"{x:,}" if isinstance(x, int) and abs(x) >= 10_000 else str(x)


def _type_name(raw: Any) -> str:
    if isinstance(raw, str):
        return "a string" if raw.strip() else "an empty string"
    return {bool: "a boolean", int: "an integer", float: "a number", list: "a list", dict: "a table"}.get(
        type(raw), type(raw).__name__
    )


def _kind_words(setting: Setting) -> str:
    return {
        "int": "an integer",
        "float": "a number",
        "size": "a size (65536, 2^16, 64k)",
        "str": "a string",
        "choice": "one of " + ", ".join(setting.choices),
        "text": setting.metavar or "a string",
    }[setting.kind]


def _reason(message: str, setting: Setting) -> str:
    """A parser's message without its own mention of the flag (the face adds the setting's name)."""
    for spelled in (setting.option, *setting.aliases):
        message = re.sub(rf"^{re.escape(spelled)}\s*(takes )?", lambda m: m.group(1) or "", message)
    return message if message.startswith(("takes", "must", "is", ":")) else f": {message}"


def by_name(settings: Iterable[Setting]) -> dict[str, Setting]:
    """Settings keyed by name; refuses a name declared twice (one place per setting)."""
    out: dict[str, Setting] = {}
    for s in settings:
        if s.name in out:
            raise ValueError(f"setting {s.name!r} is declared twice")
        out[s.name] = s
    return out


DEFAULT_HASHES: tuple[str, ...] = ("murmur3_32", "xxh3_64", "fnv1a_32", "crc32")
"""The hash functions audited when none is named: two strong ones and two in wide use."""

# -- the audit's own settings (each check group declares its own in hashaudit.checks) -----------------------------


AUDIT_SETTINGS: tuple[Setting, ...] = (
    Setting(
        "hashes",
        "hashes",
        "Hash function (repeatable): a registry name or module:function. Default: " + ", ".join(DEFAULT_HASHES) + ".",
        default=(),
        repeatable=True,
        flag="--hash",
        short="-H",
        metavar="NAME",
    ),
    Setting(
        "buckets",
        "hashes",
        "Table size (repeatable): 65536, 2^16, 64k. Default: derived from the number of keys.",
        default=(),
        kind="size",
        repeatable=True,
        short="-m",
        minimum=1,
        metavar="M",
    ),
    Setting(
        "schemes",
        "hashes",
        "Bucketing scheme (repeatable): mod, mask, high, range. Default: mask for powers of two, else mod.",
        default=(),
        kind="choice",
        choices=("mod", "mask", "high", "range"),
        repeatable=True,
        flag="--scheme",
        short="-s",
        metavar="S",
    ),
    Setting(
        "seed",
        "hashes",
        "Seed of seeded hashes and of every simulation and sample.",
        default=0,
        kind="int",
        minimum=0,
        maximum=2**128 - 1,
    ),
    Setting(
        "all_keys",
        "hashes",
        "Count every occurrence; by default each distinct key counts once (repeats are not the hash's fault).",
        default=False,
        kind="bool",
    ),
    Setting(
        "memory",
        "run",
        "Memory the audit's stores share (distinct-key fingerprints, full-width hash values, table counts); "
        "what does not fit is read in more passes or spilled to disk. Default: a quarter of the machine's "
        "memory, at most 1g.",
        kind="size",
        minimum=64 << 20,
        metavar="BYTES",
        recorded=False,  # a memory budget: the result is the same for any
    ),
    Setting(
        "distinct_memory",
        "hashes",
        "Memory of the distinct-key fingerprint store (about 20 bytes per distinct key). Default: a share of --memory.",
        kind="size",
        minimum=4 << 20,
        metavar="BYTES",
        recorded=False,  # a memory budget: the result is the same for any
    ),
    Setting(
        "checks",
        "checks",
        "Check groups or check names, comma-separated, or all. Default: the groups on by default.",
        default=None,
        comma_list=True,
        metavar="LIST",
    ),
    Setting(
        "alpha",
        "thresholds",
        "Family-wise error rate of one audit (Holm).",
        default=0.01,
        kind="float",
        minimum=0,
        maximum=1,
        open_range=True,
    ),
    Setting(
        "spill_dir",
        "run",
        "Folder for spilled hash values (default: the system's temporary folder).",
        metavar="DIR",
        recorded=False,
    ),
)
"""Settings of the audit that no check group owns."""

RUN_SETTINGS: tuple[Setting, ...] = (
    Setting(
        "engine",
        "run",
        "local: this machine's cores; dask: a Dask cluster (--scheduler ADDRESS, or a local one of --workers).",
        default="local",
        kind="choice",
        choices=("local", "dask"),
        recorded=False,
    ),
    Setting(
        "scheduler",
        "run",
        "Dask scheduler address (tcp://host:8786) for --engine dask.",
        metavar="ADDRESS",
        recorded=False,
    ),
    Setting("workers", "run", "Workers of a local Dask cluster.", default=2, kind="int", minimum=1, recorded=False),
    Setting(
        "threads",
        "run",
        "Hashing threads; 0 = one per core. Results are identical for any number.",
        default=0,
        kind="int",
        minimum=0,
        recorded=False,
    ),
)
"""How an audit runs: never changes its result."""
