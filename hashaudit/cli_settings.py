"""Click options made from the declared settings, ``--help`` in sections, and setting names spelled as flags.

Each :class:`~hashaudit.settings.Setting` becomes one click option whose parameter name is the setting's name;
former flags stay accepted and are hidden from ``--help``. A command made with :class:`SectionedCommand` shows its
options under the sections of ``hashaudit.settings.SECTIONS``, in declaration order.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any

import click

from hashaudit.settings import SECTIONS, Setting, SettingError


class SizeType(click.ParamType):
    """A size: ``65536``, ``2^16``, ``1<<16`` or ``64k``/``1m`` (binary multiples)."""

    name = "M"

    def convert(self, value, param, ctx):  # type: ignore[no-untyped-def]
        from hashaudit.errors import UsageError
        from hashaudit.settings import parse_size

        if isinstance(value, int):
            return value
        try:
            return parse_size(value)
        except UsageError as exc:
            self.fail(str(exc), param, ctx)


class SettingOption(click.Option):
    """A click option that knows its setting and section, and hides its former flags from ``--help``."""

    def __init__(self, *args: Any, setting: Setting, section: str, hidden_flags: tuple[str, ...] = (), **kw: Any):
        super().__init__(*args, **kw)
        self.setting = setting
        self.section = section
        self.hidden_flags = hidden_flags

    def get_help_record(self, ctx: click.Context) -> tuple[str, str] | None:
        shown = [o for o in self.opts if o not in self.hidden_flags]
        kept, self.opts = self.opts, shown
        try:
            return super().get_help_record(ctx)
        finally:
            self.opts = kept


class SectionedCommand(click.Command):
    """A command whose ``--help`` lists options under the declared sections."""

    def format_options(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        by_section: dict[str, list[tuple[str, str]]] = {}
        for param in self.get_params(ctx):
            record = param.get_help_record(ctx)
            if record is None:
                continue
            section = getattr(param, "section", "other")
            by_section.setdefault(section, []).append(record)
        titles = {**SECTIONS, "other": "Other options"}
        for section, title in titles.items():
            if by_section.get(section):
                with formatter.section(title):
                    formatter.write_dl(by_section[section])


def _type(setting: Setting) -> Any:
    if setting.comma_list:
        return click.STRING  # one comma-separated list, converted item by item by the setting
    if setting.kind == "int":
        return click.INT
    if setting.kind == "float":
        return click.FLOAT
    if setting.kind == "size":
        return SizeType()
    if setting.kind == "choice" and not setting.comma_list:
        return click.Choice(setting.choices)
    return click.STRING


def option(setting: Setting, *, default: Any = None, section: str | None = None) -> click.Option:
    """The click option of one setting (parameter name = the setting's name)."""
    flags = [setting.option, *([setting.short] if setting.short else []), *setting.aliases]
    kw: dict[str, Any] = {"help": setting.help, "metavar": setting.metavar}
    if setting.kind == "bool":
        if setting.negatable:
            flags = [f"{setting.option}/--no-{setting.option[2:]}"]
            kw.update(default=setting.default, show_default=True)
        else:
            kw.update(is_flag=True, default=False)
    else:
        kw["type"] = _type(setting)
        kw["multiple"] = setting.repeatable
        if default is not None:
            kw.update(default=default, show_default=True)
        elif setting.default not in (None, (), []) and not setting.repeatable:
            kw.update(default=_shown(setting), show_default=True)
    return SettingOption(
        [*flags, setting.name],
        setting=setting,
        section=section or setting.section,
        hidden_flags=setting.aliases,
        **kw,
    )


def _shown(setting: Setting) -> Any:
    """A default as the user would type it (``640m`` rather than 671088640)."""
    value = setting.default
    if setting.kind == "size" and isinstance(value, int) and value >= 1 << 20 and value % (1 << 20) == 0:
        return f"{value >> 30}g" if value % (1 << 30) == 0 else f"{value >> 20}m"
    return value


def options(settings: Iterable[Setting], **defaults: Any) -> Callable[[Callable], Callable]:
    """A decorator adding the options of ``settings`` (in order) to a click command."""
    made = [option(s, default=defaults.get(s.name)) for s in settings]

    def decorate(command: Callable) -> Callable:
        for made_option in reversed(made):
            click.decorators._param_memo(command, made_option)  # what click.option does with a made option
        return command

    return decorate


def flag_of(name: str) -> str:
    """A setting's command-line flag (the name itself when no setting has it)."""
    setting = _all_settings().get(name)
    return setting.option if setting is not None else f"--{name.replace('_', '-')}"


def _all_settings() -> dict[str, Setting]:
    from hashaudit.checks import group_settings
    from hashaudit.keys.options import SOURCE_SETTINGS
    from hashaudit.settings import AUDIT_SETTINGS, RUN_SETTINGS

    return {s.name: s for s in (*AUDIT_SETTINGS, *group_settings(), *SOURCE_SETTINGS, *RUN_SETTINGS)}


def as_flags(exc: SettingError) -> str:
    """A setting error worded for the command line."""
    return exc.worded(flag_of)
