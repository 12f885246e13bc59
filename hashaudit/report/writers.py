"""The report formats, declared once each: name, file suffix, help text and the function that writes the report.

Every file is written atomically (a temporary file renamed into place), so a failed write loses nothing. The path
``-`` sends a report to standard output (at most one of them: ``check_outputs`` refuses two). A baseline comparison (``hashaudit gate --baseline``) goes into the JSON
report as its ``baseline`` block, into the Markdown report as a table and into the JUnit report as a test suite;
the HTML report does not show it.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable
from dataclasses import dataclass
from typing import IO, TYPE_CHECKING

import click

if TYPE_CHECKING:  # the renderers load when a report is written: the command line's --help loads none
    from hashaudit.report.baseline import Comparison
    from hashaudit.verdict.result import AuditResult

__all__ = ["WRITERS", "ReportWriter", "write_reports"]

STDOUT = "-"


@dataclass(frozen=True)
class ReportWriter:
    """One report format.

    Attributes
    ----------
    name : str
        The format's name: the key of ``WRITERS``, of ``write_reports``' outputs and of a gate file's
        ``[reports]`` table.
    suffix : str
        The usual suffix of the file, with its dot.
    help : str
        One sentence for the command-line option that asks for the report.
    render : callable
        ``render(result, show_keys, comparison, markdown_detail) -> str``: the report's text (renderers compute
        nothing; only the Markdown report reads ``markdown_detail``).
    """

    name: str
    suffix: str
    help: str
    render: Callable[[AuditResult, bool, Comparison | None, str], str]

    def write(
        self,
        result: AuditResult,
        path: str | os.PathLike,
        *,
        show_keys: bool = False,
        comparison: Comparison | None = None,
        stdout: IO[str] | None = None,
        markdown_detail: str = "summary",
    ) -> None:
        """Write the report to ``path`` atomically, or to ``stdout`` (standard output by default) for ``-``."""
        from hashaudit.report.json_report import write_text_atomically

        text = self.render(result, show_keys, comparison, markdown_detail)
        if str(path) == STDOUT:
            click.echo(text, file=stdout, nl=False)
        else:
            write_text_atomically(path, text)


def _json(result: AuditResult, show_keys: bool, comparison: Comparison | None, markdown_detail: str) -> str:
    """The JSON report, with the comparison as its ``baseline`` block when there is one."""
    from hashaudit.report.json_report import report_dict, to_json

    if comparison is None:
        return to_json(result)
    document = report_dict(result)
    document["baseline"] = comparison.to_dict()
    # not allow_nan=False: a baseline file read back may hold NaN effects (json.load accepts them)
    return json.dumps(document, indent=2, ensure_ascii=False) + "\n"


def _markdown(result: AuditResult, show_keys: bool, comparison: Comparison | None, markdown_detail: str) -> str:
    """The Markdown report, a summary that fits a pull-request comment or the full detail (never shows keys)."""
    from hashaudit.report.markdown import render_markdown

    rows = None if comparison is None else comparison.rows
    return render_markdown(result, comparison=rows, detail=markdown_detail)


def _junit(result: AuditResult, show_keys: bool, comparison: Comparison | None, markdown_detail: str) -> str:
    """The JUnit XML report (never shows keys)."""
    from hashaudit.report.junit import render_junit

    return render_junit(result, comparison=None if comparison is None else comparison.rows)


def _html(result: AuditResult, show_keys: bool, comparison: Comparison | None, markdown_detail: str) -> str:
    """The HTML page (it does not show the comparison)."""
    from hashaudit.report.html import render_html

    return render_html(result, show_keys=show_keys)


WRITERS: dict[str, ReportWriter] = {
    writer.name: writer
    for writer in (
        ReportWriter("json", ".json", "Write the JSON report to FILE ('-': stdout).", _json),
        ReportWriter(
            "markdown",
            ".md",
            "Write the Markdown report to FILE ('-': stdout): a summary that fits a pull-request comment, or every "
            "check with --markdown-detail full.",
            _markdown,
        ),
        ReportWriter("junit", ".xml", "Write JUnit XML to FILE, one test case per check ('-': stdout).", _junit),
        ReportWriter("html", ".html", "Write the HTML report (one self-contained file) to FILE ('-': stdout).", _html),
    )
}


def write_reports(
    result: AuditResult,
    outputs: dict[str, str | None],
    *,
    show_keys: bool = False,
    comparison: Comparison | None = None,
    markdown_detail: str = "summary",
) -> None:
    """Write every report asked for, in the order of ``WRITERS``.

    Parameters
    ----------
    result : AuditResult
        The audit to report.
    outputs : dict of str to str or None
        A path per format name (a key of ``WRITERS``); a format whose path is None or empty is not written.
    show_keys : bool
        Show the keys the audit collected, in the reports that can (the HTML page).
    comparison : Comparison, optional
        A comparison with a baseline report, for the reports that show it (JSON, Markdown, JUnit).
    markdown_detail : {"summary", "full"}
        How much the Markdown report holds: a summary that fits a pull-request comment, or every check.

    Raises
    ------
    ValueError
        When ``outputs`` names a format that is not in ``WRITERS``.
    """
    unknown = sorted(set(outputs) - set(WRITERS))
    if unknown:
        raise ValueError(f"no report format {', '.join(map(repr, unknown))} (known: {', '.join(WRITERS)})")
    for name, writer in WRITERS.items():
        path = outputs.get(name)
        if path:
            writer.write(result, path, show_keys=show_keys, comparison=comparison, markdown_detail=markdown_detail)


def check_outputs(outputs: dict[str, str | None], inputs: list[str]) -> None:
    """Refuse, before any key is read, a report path that cannot be written or would replace something.

    An output may not be an input in any form (a key file, an SQLite file behind a URL, the gate's config, the
    baseline), not something other than a regular file (a folder, a link, a pipe, a device), not in a folder that
    does not exist or cannot be written, and not the path of another report. ``-`` is standard output, for one
    report at most.

    Parameters
    ----------
    outputs : dict of str to str or None
        A path per format name.
    inputs : list of str
        Every file or URL the run reads.

    Raises
    ------
    UsageError
        One line naming the output and the reason.
    """
    import os
    import stat

    from hashaudit.errors import UsageError

    given = [(name, str(path)) for name, path in outputs.items() if path]
    if sum(path == STDOUT for _, path in given) > 1:
        raise UsageError("only one report can go to standard output ('-')")
    seen: dict[str, str] = {}
    read = [p for p in (_file_of(i) for i in inputs) if p and os.path.exists(p)]
    for name, path in given:
        if path == STDOUT:
            continue
        real = os.path.realpath(path)
        if real in seen:
            raise UsageError(f"--{name} {path!r} is also the path of the {seen[real]} report")
        seen[real] = name
        try:
            info = os.lstat(path)
        except FileNotFoundError:
            info = None
        if info is not None and not stat.S_ISREG(info.st_mode):
            raise UsageError(f"refusing to write the {name} report over {path!r}: not a regular file")
        if info is not None and any(os.path.samefile(path, other) for other in read):
            raise UsageError(f"refusing to write the {name} report over {path!r}: it is an input")
        folder = os.path.dirname(os.path.abspath(path))
        if not os.path.isdir(folder):
            raise UsageError(f"cannot write the {name} report {path!r}: folder {folder!r} does not exist")
        if not os.access(folder, os.W_OK):
            raise UsageError(f"cannot write the {name} report {path!r}: folder {folder!r} is not writable")


def _file_of(source: str) -> str | None:
    """The local file behind an input: the path itself, or an SQLite URL's file (None: no local file)."""
    if source == STDOUT:
        return None
    if "://" not in source:
        return source
    from urllib.parse import unquote, urlsplit

    parts = urlsplit(source)
    if parts.scheme.startswith("sqlite") and parts.path:
        path = unquote(parts.path)
        return path[1:] if path.startswith("/") else path  # sqlite:///rel.db is relative, sqlite:////abs.db absolute
    return None
