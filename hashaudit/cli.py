"""The ``hashaudit`` command: parses options, calls the library, renders, picks the exit code.

Options come from the declared settings (``hashaudit.cli_settings``): a setting's flag is its name with dashes.
Exit codes: 0 every check passed; 1 at least one check failed; 2 usage, input or environment error (one line
on stderr; ``--debug`` shows the traceback).
"""

from __future__ import annotations

import atexit
import json
import os
import re
import signal
import sys
import threading
import traceback
from typing import NoReturn

import click
from click.core import ParameterSource

from hashaudit.checks import group_settings
from hashaudit.cli_settings import SectionedCommand, SizeType, as_flags, options
from hashaudit.errors import HashAuditError, UsageError
from hashaudit.keys.options import SOURCE_SETTINGS
from hashaudit.report.writers import WRITERS, check_outputs
from hashaudit.settings import AUDIT_SETTINGS, RUN_SETTINGS, Setting, SettingError

EXIT_OK, EXIT_FAIL, EXIT_ERROR = 0, 1, 2
REPORT_SETTINGS = tuple(Setting(w.name, "reports", w.help, metavar="FILE", recorded=False) for w in WRITERS.values())
VIEW_SETTINGS = (
    Setting(
        "show_keys",
        "reports",
        "Name up to five keys of each full-width collision group in the reports (reads the input twice). Keys are "
        "personal data in many dumps: by default no report shows any.",
        default=False,
        kind="bool",
    ),
    Setting("show_all", "reports", "List passing checks too.", default=False, kind="bool", flag="--all"),
    Setting(
        "markdown_detail",
        "reports",
        "How much the Markdown report holds: summary (the verdicts, every failing and warning check, a table per "
        "hash; fits a pull-request comment) or full (every check with its effect).",
        default="summary",
        kind="choice",
        choices=("summary", "full"),
        recorded=False,
    ),
    Setting(
        "quiet",
        "reports",
        "Print nothing but errors; the exit code tells the verdict.",
        default=False,
        kind="bool",
        short="-q",
    ),
)
DATABASES = Setting(
    "databases",
    "sources",
    "A database to read keys from (repeatable): an SQLite file or a URL; with --query or --db-table.",
    default=(),
    repeatable=True,
    flag="--db",
    metavar="URL",
    recorded=False,
)
PLAN_SOURCE_SETTINGS = tuple(
    s for s in SOURCE_SETTINGS if s.name not in ("weight_column", "db_split_column", "db_split_parts")
)


def _debug_requested(argv: list[str] | None = None) -> bool:
    args = sys.argv[1:] if argv is None else argv
    return "--debug" in args or os.environ.get("HASHAUDIT_DEBUG") == "1"


def _common(command):  # type: ignore[no-untyped-def]
    """``--color`` and ``--debug``, last in every command's help."""
    command = click.option("--color/--no-color", default=None, help="Colour the verdicts (default: on a terminal).")(
        command
    )
    return click.option("--debug", is_flag=True, help="Show the traceback of an error.")(command)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="hashaudit")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def cli(debug: bool) -> None:
    """Audit hash functions and bucketing rules on real key sets."""


def _take(values: dict, settings: tuple[Setting, ...] | dict) -> dict:
    """The values of ``settings`` removed from the command's keywords."""
    return {name: values.pop(name) for name in settings if name in values} if isinstance(settings, dict) else {
        s.name: values.pop(s.name) for s in settings if s.name in values
    }  # fmt: skip


def _source_options(values: dict):  # type: ignore[no-untyped-def]
    from hashaudit.keys.options import SourceOptions
    from hashaudit.keys.sql import check_split_options

    taken = _take(values, SOURCE_SETTINGS)
    taken["columns"] = list(taken.get("columns") or ())
    options = SourceOptions.from_settings(**taken)
    check_split_options(options)
    return options


def _show(result, quiet: bool, show_all: bool, color: bool | None, outputs: dict, comparison=None) -> None:  # type: ignore[no-untyped-def]
    """The terminal report (and the baseline comparison) on standard output, or on standard error when a report
    was written there (``-``), so that standard output stays that one report."""
    if quiet:
        return
    from hashaudit.report.terminal import render

    err = "-" in outputs.values()
    use_colour = (sys.stderr if err else sys.stdout).isatty() if color is None else color
    click.echo(render(result, show_all=show_all, colour=use_colour), color=use_colour, err=err)
    if comparison is not None:
        from hashaudit.report.baseline import comparison_text

        click.echo(comparison_text(comparison.rows), err=err)


@cli.command(cls=SectionedCommand)
@click.argument("sources", nargs=-1, metavar="SOURCE...")
@options((DATABASES, *SOURCE_SETTINGS))
@options(AUDIT_SETTINGS)
@options(group_settings())
@options(REPORT_SETTINGS + VIEW_SETTINGS)
@options(RUN_SETTINGS)
@_common
def audit(sources, databases, show_keys, show_all, quiet, color, debug, engine, scheduler, workers, threads, **values):  # type: ignore[no-untyped-def]
    """Audit how SOURCE's keys land in hash tables under each hash function and bucketing scheme.

    SOURCE is a key file (one key per line, CSV/TSV, JSON Lines, Parquet, Arrow; .gz .bz2 .xz .zst by suffix), an
    SQLite file or - for standard input. Exit code 0: every check passed; 1: a check failed; 2: bad usage or input.
    """
    from hashaudit.checks import Thresholds, plan_settings, threshold_settings
    from hashaudit.checks.neighbours import neighbour_keys_for
    from hashaudit.engine.plan import AuditPlan
    from hashaudit.report.writers import write_reports

    sources = (*sources, *databases)
    if not sources:
        raise UsageError("give a SOURCE (a key file, - for standard input) or --db URL")
    outputs = _take(values, REPORT_SETTINGS)
    markdown_detail = values.pop("markdown_detail")
    check_outputs(outputs, list(sources))
    options_ = _source_options(values)
    thresholds = Thresholds(**_take(values, threshold_settings()))
    planned = _take(values, plan_settings())
    if click.get_current_context().get_parameter_source("neighbour_keys") == ParameterSource.DEFAULT:
        planned["neighbour_keys"] = neighbour_keys_for(options_)  # integer keys get integer neighbours
    plan = AuditPlan(thresholds=thresholds, **planned)
    if values:
        raise UsageError(f"options not handled: {', '.join(values)}")  # a declared setting nothing reads: a bug
    if engine == "dask":
        from hashaudit.engine.distributed import audit_dask

        if show_keys:
            raise UsageError("--show-keys reads the input again on this machine; use the local engine")
        result = audit_dask(
            list(sources), plan, options_, scheduler=scheduler, workers=workers, figures=bool(outputs.get("html"))
        )
    else:
        from hashaudit.engine import warmup
        from hashaudit.engine.sources import audit as run_audit

        progress = _progress(quiet)
        helper = warmup.start(plan)  # an empty kernel cache: a second process compiles half the kernels
        try:
            result = run_audit(
                list(sources),
                plan,
                options_,
                threads=threads,
                show_keys=show_keys,
                progress=progress,
                figures=bool(outputs.get("html")),  # the page's figures are computed only for the page
            )
        finally:
            warmup.stop(helper)
            if progress is not None:
                progress.close()
    write_reports(result, outputs, show_keys=show_keys, markdown_detail=markdown_detail)
    _show(result, quiet, show_all, color, outputs)
    sys.exit(result.exit_code)


@cli.command(cls=SectionedCommand)
@click.option("--config", "config_path", metavar="FILE", help="TOML file (default: hashaudit.toml, or pyproject.toml).")
@click.option("--baseline", metavar="FILE", help="An earlier JSON report: fail on regressions against it.")
@click.option("--tolerance", type=float, help="How much an effect may grow before it counts as a regression.")
@options(REPORT_SETTINGS + VIEW_SETTINGS[1:])
@options(RUN_SETTINGS[-1:])
@_common
def gate(config_path, baseline, tolerance, show_all, quiet, color, debug, threads, **outputs):  # type: ignore[no-untyped-def]
    """Run the audit a TOML file describes and exit 1 when a check fails or a check regressed against --baseline.

    Exit code 0: every check passed and nothing regressed; 1: a check failed or regressed; 2: bad usage or input.
    """
    from hashaudit.engine import warmup
    from hashaudit.engine.sources import audit as run_audit
    from hashaudit.gate import load_config
    from hashaudit.report.baseline import Comparison, compare, read_baseline
    from hashaudit.report.json_report import report_dict
    from hashaudit.report.writers import write_reports

    config = load_config(config_path)
    markdown_detail = outputs.pop("markdown_detail")
    outputs = {name: outputs.get(name) or config.reports.get(name) for name in WRITERS}
    base_path = baseline or config.baseline
    check_outputs(outputs, [*config.sources, str(config.path), *([base_path] if base_path else [])])
    old = read_baseline(base_path) if base_path else None  # read before the audit: a bad baseline fails fast
    progress = _progress(quiet)
    helper = warmup.start(config.plan)  # an empty kernel cache (a fresh CI runner): a second process compiles too
    try:
        result = run_audit(
            config.sources,
            config.plan,
            config.options,
            threads=threads,
            progress=progress,
            figures=bool(outputs["html"]),
        )
    finally:
        warmup.stop(helper)
        if progress is not None:
            progress.close()
    comparison = None
    if old is not None:
        rows = compare(report_dict(result), old, config.tolerance if tolerance is None else tolerance)
        comparison = Comparison(base_path, rows)
    write_reports(result, outputs, comparison=comparison, markdown_detail=markdown_detail)
    _show(result, quiet, show_all, color, outputs, comparison)
    sys.exit(EXIT_FAIL if result.exit_code or (comparison is not None and comparison.regressed) else EXIT_OK)


@cli.command(cls=SectionedCommand)
@click.argument("sources", nargs=-1, metavar="[SOURCE...]")
@click.option("--keys", "-n", "n_keys", type=SizeType(), help="Number of keys (or give SOURCE to count them).")
@click.option("--buckets", "-m", type=SizeType(), help="Table size.")
@click.option("--load", "load_factor", type=float, help="Target load factor n/m (instead of --buckets).")
@click.option(
    "--target",
    metavar="NAME=VALUE",
    help="Recommend a table meeting this: mean-hit, mean-miss, p99-hit or p99-miss (probes), or no-collision "
    "(probability). Default, without --buckets or --load: mean-hit=2. Exit code 1 when your keys miss it.",
)
@click.option(
    "--table-kind",
    default="linear",
    show_default=True,
    type=click.Choice(["chaining", "linear", "quadratic", "double", "robin-hood"]),
    help="Table organisation the recommendation is for.",
)
@click.option(
    "--sizes",
    default="pow2",
    show_default=True,
    type=click.Choice(["pow2", "prime", "any"]),
    help="Table sizes to choose from.",
)
@click.option("--hash", "-H", "hash_name", metavar="NAME", help="Hash whose values of SOURCE's keys are simulated.")
@click.option("--hash-width", type=int, help="Bits of the hash value, for its birthday bound (default: -H's width).")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the simulations.")
@click.option("--json", "json_path", metavar="FILE", help="Write the plan as JSON to FILE ('-' for stdout).")
@options((DATABASES, *PLAN_SOURCE_SETTINGS))
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def plan(
    sources, n_keys, buckets, load_factor, target, table_kind, sizes, hash_name, hash_width, seed, json_path, debug,
    databases, **source_values,
):  # type: ignore[no-untyped-def]  # fmt: skip
    """What simple uniform hashing predicts for N keys in a table, and the table that meets a target.

    With SOURCE, the keys are counted (distinct keys) and the recommended table is also simulated with their hash
    values under -H (default xxh3_64), beside the theory and an ideal hash.
    """
    from hashaudit.report.plan_text import plan_text
    from hashaudit.stats.theory import plan_capacity
    from hashaudit.tables.planner import parse_target, recommend

    sources = (*sources, *databases)
    check_outputs({"json": json_path}, list(sources))
    values, value_width = None, 64
    if sources:
        from hashaudit.engine.sources import measure_keys

        n_keys, values, value_width = measure_keys(
            sources, hash_name or "xxh3_64", seed, _source_options(source_values)
        )
        hash_width = hash_width or value_width
    elif hash_name:
        from hashaudit.hashes.registry import REGISTRY

        hash_width = hash_width or REGISTRY.get(hash_name).width
    if n_keys is None:
        raise UsageError("give --keys N, or a SOURCE whose keys are counted")
    if n_keys < 1:
        raise UsageError(f"--keys must be at least 1, not {n_keys}")
    if buckets is not None and buckets < 1:
        raise UsageError(f"--buckets must be a positive integer, not {buckets}")
    if hash_width is not None and not 1 <= hash_width <= 512:
        raise UsageError(f"--hash-width must be between 1 and 512 bits, not {hash_width}")
    advice = None
    if target is None and buckets is None and load_factor is None:
        target = DEFAULT_PLAN_TARGET  # the question a table's owner asks first
    if target is not None:
        if buckets is not None or load_factor is not None:
            raise UsageError("give --target, or one of --buckets and --load, not both")
        advice = recommend(n_keys, table_kind, parse_target(target), sizes, hash_width, values, value_width, seed)
        buckets = advice["slots"]
    data = plan_capacity(n_keys, buckets=buckets, load_factor=load_factor).to_dict()
    if advice is not None:
        data["recommendation"] = advice
    elif hash_width is not None:
        from hashaudit.stats.theory import keys_for_even_odds, p_no_collision

        data["hash_width"] = {
            "bits": hash_width,
            "keys_for_even_odds": keys_for_even_odds(2.0**hash_width),
            "p_no_full_collision": p_no_collision(2.0**hash_width, n_keys),
        }
    if json_path:
        text = json.dumps(data, indent=2, allow_nan=False) + "\n"
        if json_path == "-":
            click.echo(text, nl=False)
            return
        from hashaudit.report.json_report import write_text_atomically

        write_text_atomically(json_path, text)
    click.echo(plan_text(data))
    missed = _missed_by_your_keys(advice)
    if missed:
        click.echo(missed)
        sys.exit(EXIT_FAIL)


DEFAULT_PLAN_TARGET = "mean-hit=2"
_MEASURE = {"mean-hit": "hit_mean", "p99-hit": "hit_p99", "mean-miss": "miss_mean", "p99-miss": "miss_p99"}


def _missed_by_your_keys(advice: dict | None) -> str | None:
    """A sentence when the recommended table, filled with the user's own keys, misses the target (else None)."""
    measured = (advice or {}).get("measured")
    goal = (advice or {}).get("target") or {}
    field = _MEASURE.get(goal.get("name", ""))
    if not measured or field is None or measured[field] <= goal["value"]:
        return None
    return (
        f"your keys miss the target: under this hash they cost {measured[field]:,.1f} probes ({goal['name']}) in the "
        f"recommended table against the {goal['value']:g} asked for — the hash does not spread these keys; audit it "
        "(hashaudit audit) or choose another"
    )


def _progress(quiet: bool):  # type: ignore[no-untyped-def]
    """A progress line on standard error when it is a terminal (and not --quiet)."""
    if quiet or not sys.stderr.isatty():
        return None
    from hashaudit.report.progress import ProgressLine

    return ProgressLine()


@cli.command()
@click.option("--json", "as_json", is_flag=True, help="Print the registry as JSON.")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def hashes(as_json, debug):  # type: ignore[no-untyped-def]
    """List the registered hash functions (compiles nothing)."""
    from hashaudit.hashes.registry import REGISTRY

    specs = REGISTRY.specs()
    if as_json:
        fields = ("name", "width", "seeded", "path", "integer_keys", "description")
        click.echo(json.dumps([{f: getattr(s, f) for f in fields} for s in specs], indent=2))
        return
    click.echo(f"{'name':<14} {'bits':>4}  {'seed':<4}  {'path':<7}  description")
    for s in specs:
        click.echo(f"{s.name:<14} {s.width:>4}  {'yes' if s.seeded else 'no':<4}  {s.path:<7}  {s.description}")


@cli.command()
@click.option("--json", "as_json", is_flag=True, help="Print the rules as JSON.")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def placements(as_json, debug):  # type: ignore[no-untyped-def]
    """List the placement rules of deployed systems that --placement reproduces (compiles nothing)."""
    from hashaudit.placements.rules import RULES

    rows = [
        {
            "name": r.name,
            "parameters": {p.name: p.help for p in r.params},
            "models": r.models,
            "reference": r.reference,
            "hash_bits": r.width,
        }
        for r in RULES.values()
    ]
    if as_json:
        click.echo(json.dumps(rows, indent=2))
        return
    for rule in RULES.values():
        params = ",".join(
            p.form
            if p.default is None and not p.listed
            else f"[{p.form}]"
            if p.default is None
            else f"[{p.name}={p.default}]"
            for p in rule.params
        )
        click.echo(f"{rule.name}:{params}\n    {rule.models}\n    checked against {rule.reference}")


def _on_sigterm(signum: int, frame: object) -> None:
    """SIGTERM leaves through ``SystemExit(143)`` (128 + 15, what a shell reports) instead of the default abrupt end,
    so ``finally`` blocks, ``close()`` and exit hooks run and spill folders are removed, as on Ctrl-C."""
    raise SystemExit(143)


def _one_line(text: str) -> str:
    """``text`` with its control characters (a newline in a file name, say) written as escapes: one line."""
    return re.sub(r"[\x00-\x1f\x7f]", lambda m: repr(m[0])[1:-1], text)


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the command, turning expected errors into one line on stderr and exit code 2."""
    on_main_thread = threading.current_thread() is threading.main_thread()  # the only thread that may set one
    previous = signal.signal(signal.SIGTERM, _on_sigterm) if on_main_thread else None
    try:
        code = cli.main(args=argv, prog_name="hashaudit", standalone_mode=False)
    except click.exceptions.Exit as exc:
        code = exc.exit_code
    except click.ClickException as exc:
        exc.show()
        code = EXIT_ERROR
    except (click.exceptions.Abort, KeyboardInterrupt):
        click.echo("hashaudit: interrupted", err=True)
        code = 130
    except HashAuditError as exc:
        if _debug_requested(argv):
            traceback.print_exc()
        message = as_flags(exc) if isinstance(exc, SettingError) else str(exc)
        click.echo(f"hashaudit: error: {_one_line(message)}", err=True)
        code = EXIT_ERROR
    except MemoryError:
        if _debug_requested(argv):
            traceback.print_exc()
        click.echo(
            "hashaudit: error: out of memory (try smaller --buckets, a smaller --distinct-memory or "
            "--collision-memory, or fewer hash functions at once)",
            err=True,
        )
        code = EXIT_ERROR
    except OSError as exc:
        if _debug_requested(argv):
            traceback.print_exc()
        where = f" {exc.filename!r}" if getattr(exc, "filename", None) else ""
        click.echo(f"hashaudit: error:{_one_line(where)} {_one_line(str(exc.strerror or exc))}", err=True)
        code = EXIT_ERROR
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else EXIT_ERROR
    except Exception as exc:  # a bug: still one line, and the way to see more
        if _debug_requested(argv):
            traceback.print_exc()
        click.echo(
            f"hashaudit: internal error: {type(exc).__name__}: {_one_line(str(exc))} (rerun with --debug)", err=True
        )
        code = EXIT_ERROR
    if previous is not None:  # None: not set from Python (or not the main thread), so nothing to put back
        signal.signal(signal.SIGTERM, previous)
    sys.exit(code if isinstance(code, int) else EXIT_OK)


ONE_BLAS_THREAD = ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
"""Environment variables set to 1 by the command (not by the library) when the user has not set them."""


def run() -> NoReturn:
    """The console script (and ``python -m hashaudit``): ``main``, then the end of the process without tearing the
    interpreter down. Clearing the modules of numba, llvmlite and scipy one object at a time takes ~0.3 s after
    every command that compiled or loaded a kernel; the command's files are closed by then, and the exit hooks
    (spill folders, the warm-up helper's, Dask's) still run.

    Before numpy loads, the BLAS library is held to one thread unless the user chose otherwise
    (:data:`ONE_BLAS_THREAD`): hashaudit does its own threading, and OpenBLAS's idle threads spin on the cores the
    audit's threads need (measured: 0.1-0.2 s of CPU on the default audit of the sample file); a sum split across
    BLAS threads could also make a figure depend on the machine's core count."""
    for variable in ONE_BLAS_THREAD:
        os.environ.setdefault(variable, "1")
    try:
        main()
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else EXIT_ERROR
    _leave(code)


def _leave(code: int) -> NoReturn:
    """Exit with ``code`` once the exit hooks have run and the standard streams are flushed, skipping the teardown
    of the modules. While a thread that is not a daemon still runs, the interpreter's usual exit waits for it; under a
    profiler or a tracer, the usual exit lets it write what it measured."""
    main_thread = threading.main_thread()
    if any(t is not main_thread and not t.daemon and t.is_alive() for t in threading.enumerate()):
        sys.exit(code)
    if sys.getprofile() is not None or sys.gettrace() is not None:
        sys.exit(code)  # a profiler or a tracer (python -m cProfile) writes its figures after the command returns
    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a closed pipe or a full disk: the output is incomplete
            code = code or EXIT_ERROR
    os._exit(code)
