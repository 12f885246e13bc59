"""The ``hashaudit`` command: parses options, calls the library, renders, picks the exit code.

Exit codes: 0 every check passed; 1 at least one check failed; 2 usage, input or environment error (one line
on stderr; ``--debug`` shows the traceback).
"""

from __future__ import annotations

import json
import os
import sys
import traceback

import click

from hashaudit.errors import HashAuditError, UsageError

EXIT_OK, EXIT_FAIL, EXIT_ERROR = 0, 1, 2


class TableSize(click.ParamType):
    """A table size: ``65536``, ``2^16``, ``1<<16`` or ``64k``/``1m`` (binary multiples)."""

    name = "M"

    def convert(self, value, param, ctx):  # type: ignore[no-untyped-def]
        from hashaudit.tables.sizes import parse_size

        try:
            return parse_size(value)
        except UsageError as exc:
            self.fail(str(exc), param, ctx)


def _debug_requested(argv: list[str] | None = None) -> bool:
    args = sys.argv[1:] if argv is None else argv
    return "--debug" in args or os.environ.get("HASHAUDIT_DEBUG") == "1"


def source_options(command):  # type: ignore[no-untyped-def]
    """The options that say how records of a source become keys (shared by ``audit`` and ``plan``)."""
    for option in reversed(_SOURCE_OPTIONS):
        command = option(command)
    return command


_SOURCE_OPTIONS = [
    click.option(
        "--query",
        metavar="SQL",
        help="Database sources (an SQLite file or a URL such as postgresql://…): the SELECT whose first column, or "
        "--column, holds the keys.",
    ),
    click.option(
        "--db-table", metavar="TABLE", help="Database sources: read --column from TABLE (instead of --query)."
    ),
    click.option(
        "--db-split-column",
        metavar="COLUMN",
        help="Database sources, --engine dask: split the source into key ranges of COLUMN (a column of the query's "
        "result, or of --db-table), read in parallel: equal-width ranges of an integer column, ntile boundaries of "
        "any other, plus one for NULLs. The local engine reads the source as one stream.",
    ),
    click.option(
        "--db-split-parts",
        type=int,
        metavar="N",
        help="With --db-split-column: the number of key ranges, 1 to 4096 (default: one per 2,000,000 rows).",
    ),
    click.option(
        "--db-driver",
        type=click.Choice(["auto", "adbc", "sqlalchemy"]),
        default="auto",
        show_default=True,
        help="PostgreSQL: the Arrow-native ADBC driver when installed, or SQLAlchemy with psycopg.",
    ),
    click.option(
        "--integers",
        type=click.Choice(["le64", "decimal"]),
        default="le64",
        show_default=True,
        help="Parquet/Arrow integer key columns: hashed as 8-byte little-endian words, or as decimal text.",
    ),
    click.option(
        "--weight-column",
        metavar="COLUMN|PATH",
        help="CSV/TSV column or JSON Lines path of each record's weight (requests, bytes) for the shard loads.",
    ),
    click.option(
        "--format",
        "input_format",
        default="auto",
        show_default=True,
        type=click.Choice(["auto", "lines", "csv", "tsv", "jsonl", "parquet", "arrow", "sql"]),
        help="Input format (auto: by suffix).",
    ),
    click.option(
        "--column",
        "-c",
        multiple=True,
        metavar="NAME|INDEX",
        help="CSV/TSV column by name or 0-based index (repeatable: composite key).",
    ),
    click.option("--join", default="|", show_default=True, metavar="SEP", help="Separator of composite keys."),
    click.option("--field", "-f", metavar="PATH", help="JSON Lines field, dotted path (user.id)."),
    click.option("--delimiter", metavar="CHAR", help="CSV delimiter (default , for csv, tab for tsv)."),
    click.option("--no-header", is_flag=True, help="CSV/TSV files have no header row (columns by index)."),
    click.option(
        "--key-format",
        default="bytes",
        show_default=True,
        type=click.Choice(["bytes", "hex", "base64", "int"]),
        help="How a key's text becomes bytes; int = decimal, hashed as 8-byte little-endian.",
    ),
    click.option("--keep-cr", is_flag=True, help="Keep a CR before the LF as part of the key."),
    click.option("--skip-empty", is_flag=True, help="Skip empty keys instead of hashing them."),
    click.option("--raw-bytes", is_flag=True, help="Accept keys that are not UTF-8 text (binary dumps)."),
    click.option("--strip", is_flag=True, help="Strip leading and trailing ASCII whitespace from keys."),
    click.option("--lowercase", is_flag=True, help="ASCII-lowercase keys."),
    click.option("--pattern", metavar="REGEX", help="Hash only the first group of REGEX's match in each key."),
    click.option(
        "--on-bad-record",
        type=click.Choice(["fail", "skip"]),
        default="fail",
        show_default=True,
        help="A record that cannot become a key (not JSON, no such field, a bad weight, a key --key-format cannot "
        "decode, a line that is not UTF-8): stop with an error, or skip it and count it in the report.",
    ),
]


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="hashaudit")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def cli(debug: bool) -> None:
    """Audit hash functions and bucketing rules on real key sets."""


def _source_options(kw: dict):  # type: ignore[no-untyped-def]
    from hashaudit.keys.options import SourceOptions
    from hashaudit.keys.sql import check_split_options

    options = SourceOptions(
        format=kw["input_format"],
        columns=tuple(kw["column"]),
        join=kw["join"],
        field=kw["field"],
        delimiter=kw["delimiter"],
        header=not kw["no_header"],
        key_format=kw["key_format"],
        keep_cr=kw["keep_cr"],
        skip_empty=kw["skip_empty"],
        raw_bytes=kw["raw_bytes"],
        strip=kw["strip"],
        lowercase=kw["lowercase"],
        pattern=kw["pattern"],
        weight=kw.get("weight_column"),
        integers=kw.get("integers") or "le64",
        query=kw.get("query"),
        table=kw.get("db_table"),
        driver=kw.get("db_driver") or "auto",
        on_bad_record=kw.get("on_bad_record") or "fail",
        split_column=kw.get("db_split_column"),
        split_parts=kw.get("db_split_parts"),
    )
    check_split_options(options)
    return options


def _refuse_overwriting_inputs(outputs: list[str | None], sources: tuple[str, ...]) -> None:
    for out in outputs:
        if not out:
            continue
        for src in sources:
            if src != "-" and os.path.exists(out) and os.path.exists(src) and os.path.samefile(out, src):
                raise UsageError(f"refusing to write the report over the input {src!r}")


@cli.command()
@click.argument("sources", nargs=-1, metavar="SOURCE...")
@click.option(
    "--db",
    "databases",
    multiple=True,
    metavar="URL",
    help="A database to read keys from (repeatable): an SQLite file or a URL; with --query or --db-table.",
)
@click.option(
    "--hash",
    "-H",
    "hashes",
    multiple=True,
    metavar="NAME",
    help="Hash function (repeatable): a registry name or module:function. Default: a common set.",
)
@click.option(
    "--buckets",
    "-m",
    multiple=True,
    type=TableSize(),
    help="Table size (repeatable): 65536, 2^16, 64k. Default: derived from the key count.",
)
@click.option(
    "--scheme",
    "-s",
    "schemes",
    multiple=True,
    metavar="S",
    help="Bucketing scheme (repeatable): mod, mask, high, range. Default: mask for powers of two, else mod.",
)
@click.option(
    "--checks",
    metavar="LIST",
    help="Check groups or names, comma-separated: buckets, bits, collisions, avalanche, neighbours, seeds, tables, "
    "growth, tags, shards, or check names, or all. Default: all but seeds, growth, tags and shards (--tag-bits and "
    "--shards add theirs).",
)
@click.option("--avalanche-keys", type=int, default=4096, show_default=True, help="Keys sampled for avalanche.")
@click.option(
    "--avalanche-bytes",
    type=int,
    default=16,
    show_default=True,
    help="Leading bytes of each sampled key whose bits are flipped.",
)
@click.option(
    "--collision-memory",
    type=TableSize(),
    default="1g",
    show_default=True,
    metavar="BYTES",
    help="Hash values kept in memory per function for full-width collisions before spilling to disk.",
)
@click.option(
    "--spill-dir",
    type=click.Path(file_okay=False),
    metavar="DIR",
    help="Folder for spilled hash values (default: the system's temporary folder).",
)
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of seeded hashes and simulations.")
@click.option("--json", "json_path", metavar="FILE", help="Write the JSON report to FILE.")
@click.option("--html", "html_path", metavar="FILE", help="Write the HTML report (one self-contained file) to FILE.")
@click.option("--markdown", "markdown_path", metavar="FILE", help="Write a Markdown summary to FILE ('-': stdout).")
@click.option("--junit", "junit_path", metavar="FILE", help="Write JUnit XML to FILE, one test case per check.")
@source_options
@click.option("--alpha", type=float, default=0.01, show_default=True, help="Family-wise error rate (Holm).")
@click.option(
    "--max-cost-excess",
    type=float,
    default=0.05,
    show_default=True,
    help="Fail above this relative excess of probes per chained lookup.",
)
@click.option(
    "--max-empty-excess",
    type=float,
    default=0.02,
    show_default=True,
    help="Fail above this excess of empty buckets (fraction of the table).",
)
@click.option(
    "--max-load-ratio",
    type=float,
    default=1.25,
    show_default=True,
    help="Fail above this ratio of hottest bucket to its expected maximum.",
)
@click.option(
    "--max-bit-bias",
    type=float,
    default=0.01,
    show_default=True,
    help="Fail above this deviation of an output bit's share of ones from 1/2.",
)
@click.option(
    "--max-bit-correlation",
    type=float,
    default=0.05,
    show_default=True,
    help="Fail above this correlation (phi) between two output bits.",
)
@click.option(
    "--max-collision-excess",
    type=float,
    default=0.1,
    show_default=True,
    help="Fail above this excess of full-width colliding pairs over the birthday expectation.",
)
@click.option(
    "--max-probe-excess",
    type=float,
    default=0.1,
    show_default=True,
    help="Fail above this relative excess of probes per lookup in a simulated table over an ideal hash.",
)
@click.option(
    "--table-kind",
    "table_kinds",
    multiple=True,
    type=click.Choice(["chaining", "linear", "quadratic", "double", "robin-hood"]),
    help="Simulated table organisation for probe_cost (repeatable). Default: all five.",
)
@click.option(
    "--load",
    "loads",
    multiple=True,
    type=float,
    metavar="L",
    help="Load factor at which simulated lookups are measured (repeatable). Default: 0.25 0.5 0.75 0.9 0.95.",
)
@click.option(
    "--table-slots",
    type=TableSize(),
    metavar="M",
    help="Slots of the simulated tables. Default: the largest power of two up to 2^18 that the keys fill.",
)
@click.option(
    "--growth",
    "growth",
    multiple=True,
    metavar="FACTOR@LOAD",
    help="Growth policy replayed by growth_cost (repeatable), e.g. 2@0.75 (double when three quarters full) or "
    "1.5@0.875. Default: 2@0.75.",
)
@click.option(
    "--growth-start",
    type=TableSize(),
    default="16",
    show_default=True,
    metavar="M",
    help="Slots of a growing table before its first resize.",
)
@click.option(
    "--max-order-ratio",
    type=float,
    default=4.0,
    show_default=True,
    help="Fail when building a growing table from the keys in some order costs more than this many times a "
    "random order.",
)
@click.option(
    "--tag-bits",
    metavar="N[@SHIFT]",
    help="Tag bits a table keeps beside each slot, from bit SHIFT (default: the top N bits); runs tag_bits.",
)
@click.option(
    "--max-tag-excess",
    type=float,
    default=0.25,
    show_default=True,
    help="Fail above this relative excess of false tag matches per lookup over an ideal hash.",
)
@click.option(
    "--shards",
    "shards",
    multiple=True,
    type=int,
    metavar="N",
    help="Shard, partition or node count (repeatable); runs the shard checks: balance, movement, hot keys.",
)
@click.option(
    "--shard-scheme",
    "shard_schemes",
    multiple=True,
    type=click.Choice(["mod", "jump", "rendezvous", "ring"]),
    help="How a hash value picks a shard (repeatable). Default: mod.",
)
@click.option("--vnodes", type=int, default=160, show_default=True, help="Virtual nodes per shard on a ring.")
@click.option(
    "--shard-weights",
    metavar="W1,W2,...",
    help="Capacity weight of each shard (rendezvous and ring), comma-separated.",
)
@click.option(
    "--max-shard-imbalance",
    type=float,
    default=0.05,
    show_default=True,
    help="Fail when the hottest shard's distinct keys exceed an ideal hash's expected maximum by more than this.",
)
@click.option(
    "--max-movement-excess",
    type=float,
    default=0.1,
    show_default=True,
    help="Fail when adding a shard moves this much more of the keys than an ideal hash under the same scheme.",
)
@click.option(
    "--show-keys",
    is_flag=True,
    help="Name up to five keys of each full-width collision group in the reports (reads the input twice). "
    "Keys are personal data in many dumps: by default no report shows any.",
)
@click.option(
    "--all-keys",
    is_flag=True,
    help="Count every occurrence; by default each distinct key counts once (repeats are not the hash's fault).",
)
@click.option(
    "--distinct-memory",
    type=TableSize(),
    default="640m",
    show_default=True,
    metavar="BYTES",
    help="Memory budget of the distinct-key fingerprint store (about 20 bytes per distinct key).",
)
@click.option(
    "--engine",
    type=click.Choice(["local", "dask"]),
    default="local",
    show_default=True,
    help="local: this machine's cores; dask: a Dask cluster (--scheduler ADDRESS, or a local one of --workers).",
)
@click.option("--scheduler", metavar="ADDRESS", help="Dask scheduler address (tcp://host:8786) for --engine dask.")
@click.option("--workers", type=int, default=2, show_default=True, help="Workers of a local Dask cluster.")
@click.option(
    "--threads",
    type=int,
    default=0,
    show_default=True,
    help="Hashing threads; 0 = one per core. Results are identical for any number.",
)
@click.option("--all", "show_all", is_flag=True, help="List passing checks too.")
@click.option("--quiet", "-q", is_flag=True, help="Print nothing but errors; the exit code tells the verdict.")
@click.option("--color/--no-color", default=None, help="Colour the verdicts (default: when on a terminal).")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def audit(
    sources,
    databases,
    hashes,
    buckets,
    schemes,
    checks,
    avalanche_keys,
    avalanche_bytes,
    collision_memory,
    spill_dir,
    seed,
    json_path,
    html_path,
    markdown_path,
    junit_path,
    alpha,
    max_cost_excess,
    max_empty_excess,
    max_load_ratio,
    max_bit_bias,
    max_bit_correlation,
    max_collision_excess,
    max_probe_excess,
    table_kinds,
    loads,
    table_slots,
    growth,
    growth_start,
    max_order_ratio,
    tag_bits,
    max_tag_excess,
    shards,
    shard_schemes,
    vnodes,
    shard_weights,
    max_shard_imbalance,
    max_movement_excess,
    show_keys,
    all_keys,
    distinct_memory,
    engine,
    scheduler,
    workers,
    threads,
    show_all,
    quiet,
    color,
    debug,
    **source_kw,
):  # type: ignore[no-untyped-def]
    """Audit how SOURCE's keys land in hash tables under each hash function and bucketing scheme.

    SOURCE is a key file (one key per line, CSV/TSV, JSON Lines; .gz .bz2 .xz .zst by suffix) or - for
    standard input. Exit code 0: every check passed; 1: a check failed; 2: bad usage or input.
    """
    from hashaudit.engine.checks import parse_checks
    from hashaudit.engine.local import AuditPlan
    from hashaudit.engine.sources import audit as run_audit
    from hashaudit.hashes.registry import DEFAULT_HASHES
    from hashaudit.report.json_report import write_json
    from hashaudit.report.terminal import render
    from hashaudit.stats.tags import parse_tag_bits
    from hashaudit.tables.growth import parse_growth
    from hashaudit.tables.simulate import DEFAULT_LOADS, TABLE_KINDS
    from hashaudit.verdict.findings import Thresholds

    sources = (*sources, *databases)
    if not sources:
        raise UsageError("give a SOURCE (a key file, - for standard input) or --db URL")
    _refuse_overwriting_inputs([json_path, html_path, markdown_path, junit_path], sources)
    thresholds = Thresholds(
        alpha,
        max_cost_excess,
        max_empty_excess,
        max_load_ratio,
        max_bit_bias,
        max_bit_correlation,
        collision_excess=max_collision_excess,
        probe_cost_excess=max_probe_excess,
        order_cost_ratio=max_order_ratio,
        tag_match_excess=max_tag_excess,
        shard_imbalance=max_shard_imbalance,
        movement_excess=max_movement_excess,
    )
    selected = parse_checks(checks)
    if tag_bits and "tags" not in selected:
        selected = (*selected, "tags")
    if shards and "shards" not in selected:
        selected = (*selected, "shards")
    plan = AuditPlan(
        tuple(hashes) or DEFAULT_HASHES,
        tuple(buckets),
        tuple(schemes),
        seed,
        thresholds,
        not all_keys,
        distinct_memory,
        selected,
        avalanche_keys,
        avalanche_bytes,
        collision_memory,
        spill_dir,
        table_kinds=tuple(table_kinds) or TABLE_KINDS,
        loads=tuple(loads) or DEFAULT_LOADS,
        table_slots=table_slots,
        growth=tuple(parse_growth(text, growth_start) for text in growth or ("2@0.75",)),
        tag_bits=parse_tag_bits(tag_bits) if tag_bits else None,
        shards=tuple(shards),
        shard_schemes=tuple(shard_schemes) or ("mod",),
        vnodes=vnodes,
        shard_weights=_weights(shard_weights),
    )
    if engine == "dask":
        from hashaudit.engine.distributed import audit_dask

        if show_keys:
            raise UsageError("--show-keys reads the input again on this machine; use the local engine")
        result = audit_dask(list(sources), plan, _source_options(source_kw), scheduler=scheduler, workers=workers)
    else:
        progress = _progress(quiet)
        try:
            result = run_audit(
                list(sources), plan, _source_options(source_kw), threads=threads, show_keys=show_keys, progress=progress
            )
        finally:
            if progress is not None:
                progress.close()
    if json_path:
        write_json(result, json_path)
    _write_reports(result, html_path, markdown_path, junit_path, show_keys=show_keys)
    if not quiet:
        use_colour = sys.stdout.isatty() if color is None else color
        click.echo(render(result, show_all=show_all, colour=use_colour), color=use_colour)
    sys.exit(result.exit_code)


@cli.command()
@click.option("--config", "config_path", metavar="FILE", help="TOML file (default: hashaudit.toml, or pyproject.toml).")
@click.option("--baseline", metavar="FILE", help="An earlier JSON report: fail on regressions against it.")
@click.option("--tolerance", type=float, help="How much an effect may grow before it counts as a regression.")
@click.option("--json", "json_path", metavar="FILE", help="Write the JSON report (with the comparison) to FILE.")
@click.option("--markdown", "markdown_path", metavar="FILE", help="Write a Markdown summary to FILE ('-': stdout).")
@click.option("--junit", "junit_path", metavar="FILE", help="Write JUnit XML to FILE, one test case per check.")
@click.option("--html", "html_path", metavar="FILE", help="Write the HTML report to FILE.")
@click.option("--threads", type=int, default=0, help="Hashing threads (0: one per core).")
@click.option("--all", "show_all", is_flag=True, help="List passing checks too.")
@click.option("--quiet", "-q", is_flag=True, help="Print nothing but errors; the exit code tells the verdict.")
@click.option("--color/--no-color", default=None, help="Colour the verdicts (default: when on a terminal).")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def gate(
    config_path, baseline, tolerance, json_path, markdown_path, junit_path, html_path, threads, show_all, quiet,
    color, debug,
):  # type: ignore[no-untyped-def]  # fmt: skip
    """Run the audit a TOML file describes and exit 1 when a check fails or a check regressed against --baseline.

    Exit code 0: every check passed and nothing regressed; 1: a check failed or regressed; 2: bad usage or input.
    """
    from hashaudit.engine.sources import audit as run_audit
    from hashaudit.gate import compare, comparison_text, load_config, read_baseline, resolve_output
    from hashaudit.report.terminal import render

    config = load_config(config_path)
    outputs = {
        "json": resolve_output(json_path, config, "json"),
        "markdown": resolve_output(markdown_path, config, "markdown"),
        "junit": resolve_output(junit_path, config, "junit"),
        "html": resolve_output(html_path, config, "html"),
    }
    _refuse_overwriting_inputs(list(outputs.values()), tuple(config.sources))
    base_path = baseline or config.baseline
    old = read_baseline(base_path) if base_path else None  # read before the audit: a bad baseline fails fast
    progress = _progress(quiet)
    try:
        result = run_audit(config.sources, config.plan, config.options, threads=threads, progress=progress)
    finally:
        if progress is not None:
            progress.close()
    from hashaudit.report.json_report import report_dict, write_text_atomically

    document = report_dict(result)
    rows = compare(document, old, config.tolerance if tolerance is None else tolerance) if old else None
    regressed = bool(rows) and any(r["regressed"] for r in rows)
    if rows is not None:
        document["baseline"] = {"file": base_path, "regressed": regressed, "checks": rows}
    if outputs["json"]:
        write_text_atomically(outputs["json"], json.dumps(document, indent=2, ensure_ascii=False) + "\n")
    _write_reports(result, outputs["html"], outputs["markdown"], outputs["junit"], comparison=rows)
    if not quiet:
        use_colour = sys.stdout.isatty() if color is None else color
        click.echo(render(result, show_all=show_all, colour=use_colour), color=use_colour)
        if rows is not None:
            click.echo(comparison_text(rows))
    sys.exit(EXIT_FAIL if result.exit_code or regressed else EXIT_OK)


@cli.command()
@click.argument("sources", nargs=-1, metavar="[SOURCE...]")
@click.option("--keys", "-n", "n_keys", type=TableSize(), help="Number of keys (or give SOURCE to count them).")
@click.option("--buckets", "-m", type=TableSize(), help="Table size.")
@click.option("--load", "load_factor", type=float, help="Target load factor n/m (instead of --buckets).")
@click.option(
    "--target",
    metavar="NAME=VALUE",
    help="Recommend a table meeting this: mean-hit, mean-miss, p99-hit or p99-miss (probes), or no-collision "
    "(probability).",
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
@source_options
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def plan(
    sources, n_keys, buckets, load_factor, target, table_kind, sizes, hash_name, hash_width, seed, json_path, debug,
    **source_kw,
):  # type: ignore[no-untyped-def]  # fmt: skip
    """What simple uniform hashing predicts for N keys in a table, and the table that meets a target.

    With SOURCE, the keys are counted (distinct keys) and the recommended table is also simulated with their hash
    values under -H (default xxh3_64), beside the theory and an ideal hash.
    """
    from hashaudit.stats.theory import plan_capacity
    from hashaudit.tables.planner import parse_target, recommend

    _refuse_overwriting_inputs([json_path], sources)
    values, value_width = None, 64
    if sources:
        n_keys, values, value_width = _measure_keys(sources, hash_name or "xxh3_64", seed, source_kw)
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
    if target:
        if buckets is not None or load_factor is not None:
            raise UsageError("give --target, or one of --buckets and --load, not both")
        advice = recommend(n_keys, table_kind, parse_target(target), sizes, hash_width, values, value_width, seed)
        buckets = advice["slots"]
    elif buckets is None and load_factor is None:
        raise UsageError("give one of --buckets, --load or --target")
    capacity = plan_capacity(n_keys, buckets=buckets, load_factor=load_factor)
    data = capacity.to_dict()
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
    click.echo(_plan_text(data))


def _progress(quiet: bool):  # type: ignore[no-untyped-def]
    """A progress line on standard error when it is a terminal (and not --quiet)."""
    if quiet or not sys.stderr.isatty():
        return None
    from hashaudit.report.progress import ProgressLine

    return ProgressLine()


def _write_reports(  # type: ignore[no-untyped-def]
    result, html_path, markdown_path, junit_path, *, show_keys: bool = False, comparison=None
) -> None:
    """The HTML, Markdown and JUnit reports that were asked for."""
    from hashaudit.report.json_report import write_text_atomically

    if markdown_path:
        from hashaudit.report.markdown import render_markdown

        text = render_markdown(result, comparison=comparison)
        if markdown_path == "-":
            click.echo(text, nl=False)
        else:
            write_text_atomically(markdown_path, text)
    if junit_path:
        from hashaudit.report.junit import render_junit

        write_text_atomically(junit_path, render_junit(result, comparison=comparison))
    if html_path:
        from hashaudit.report.html import write_html

        write_html(result, html_path, show_keys=show_keys)


def _weights(text: str | None) -> tuple[float, ...]:
    if not text:
        return ()
    try:
        return tuple(float(w) for w in text.split(","))
    except ValueError:
        raise UsageError(f"--shard-weights takes numbers separated by commas, not {text!r}") from None


def _measure_keys(sources: tuple[str, ...], hash_name: str, seed: int, source_kw: dict):  # type: ignore[no-untyped-def]
    """Distinct keys of the sources, and the hash values of the first ``PLAN_VALUES`` of them."""
    import numpy as np

    from hashaudit.hashes.registry import REGISTRY
    from hashaudit.keys import open_keys
    from hashaudit.stats.distinct import DistinctKeys

    spec = REGISTRY.get(hash_name)
    store = DistinctKeys()
    kept: list[np.ndarray] = []
    held = 0
    for source in sources:
        for batch in open_keys(source, _source_options(source_kw)):
            first = store.update(batch)
            if held < PLAN_VALUES:
                values = spec.hash_batch(batch, seed if spec.seeded else 0)[first]
                values = values[:, 0] if values.ndim == 2 else values
                kept.append(values[: PLAN_VALUES - held])
                held += len(kept[-1])
    if store.distinct_ == 0:
        raise UsageError("no keys to plan for")
    return store.distinct_, np.concatenate(kept), spec.width


PLAN_VALUES = 1 << 22


def _plan_text(d: dict) -> str:
    probes = d["expected_probes"]

    def cell(v: float | None) -> str:
        return "∞" if v is None else f"{v:.3f}"

    rows = [
        f"keys {d['keys']:,} in {d['buckets']:,} buckets: load factor {d['load_factor']:.4g}",
        "  probability of no collision       "
        + (f"{d['p_no_collision']:.6g}" if d["p_no_collision"] > 0 else "below 1e-300"),
        f"  keys for even odds of a collision {d['keys_for_even_odds']:,}",
        f"  expected empty buckets            {d['expected_empty_buckets']:,.1f}",
        f"  expected colliding pairs          {d['expected_colliding_pairs']:,.1f}",
        f"  expected fullest bucket           {d['expected_max_load']:.2f} keys",
        "  expected probes per lookup         hit      miss",
    ]
    for kind in ("chaining", "linear", "quadratic", "double"):
        rows.append(f"    {kind:<31}{cell(probes[kind]['hit']):>8}  {cell(probes[kind]['miss']):>8}")
    advice = d.get("recommendation")
    if advice is not None:
        goal = advice["target"]
        limit = (
            ""
            if advice["max_load"] is None
            else f"; maximum load factor {advice['max_load']:.3f} ({advice['found_by']})"
        )
        rows += [
            "",
            f"recommendation for {goal['name']} = {goal['value']:g}, {advice['table_kind']} table: "
            f"{advice['slots']:,} slots (load {advice['load']:.3f}{limit})",
            "  probes per lookup       mean hit   p99 hit  mean miss  p99 miss",
        ]
        theory = advice["theory"]
        rows.append(f"    theory              {cell(theory['hit']):>9}  {'':>8}  {cell(theory['miss']):>9}")
        for label, sim in (("ideal hash (sim.)", advice["ideal"]), ("your keys (sim.)", advice["measured"])):
            if sim is not None:
                rows.append(
                    f"    {label:<20}{sim['hit_mean']:>9.3f}  {sim['hit_p99']:>8.0f}  {sim['miss_mean']:>9.3f}  "
                    f"{sim['miss_p99']:>8.0f}   ({sim['keys']:,} keys in {sim['slots']:,} slots)"
                )
    width = (advice or {}).get("hash_width") or d.get("hash_width")
    if width is not None:
        rows += [
            "",
            f"whole {width['bits']}-bit hash value: even odds of two keys sharing it at {width['keys_for_even_odds']:,} "
            "keys; probability that none of these keys share it "
            + (f"{width['p_no_full_collision']:.6g}" if width["p_no_full_collision"] > 0 else "below 1e-300"),
        ]
    return "\n".join(rows)


@cli.command()
@click.option("--json", "as_json", is_flag=True, help="Print the registry as JSON.")
@click.option("--debug", is_flag=True, help="Show the traceback of an error.")
def hashes(as_json, debug):  # type: ignore[no-untyped-def]
    """List the registered hash functions (compiles nothing)."""
    from hashaudit.hashes.registry import REGISTRY

    specs = REGISTRY.specs()
    if as_json:
        click.echo(
            json.dumps(
                [
                    {
                        "name": s.name,
                        "width": s.width,
                        "seeded": s.seeded,
                        "path": s.path,
                        "integer_keys": s.integer_keys,
                        "description": s.description,
                    }
                    for s in specs
                ],
                indent=2,
            )
        )
        return
    click.echo(f"{'name':<14} {'bits':>4}  {'seed':<4}  {'path':<7}  description")
    for s in specs:
        click.echo(f"{s.name:<14} {s.width:>4}  {'yes' if s.seeded else 'no':<4}  {s.path:<7}  {s.description}")


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the command, turning expected errors into one line on stderr and exit code 2."""
    try:
        code = cli.main(args=argv, prog_name="hashaudit", standalone_mode=False)
    except click.exceptions.Exit as exc:
        code = exc.exit_code
    except click.ClickException as exc:
        exc.show()
        code = EXIT_ERROR
    except click.exceptions.Abort:
        click.echo("hashaudit: interrupted", err=True)
        code = 130
    except HashAuditError as exc:
        if _debug_requested(argv):
            traceback.print_exc()
        click.echo(f"hashaudit: error: {exc}", err=True)
        code = EXIT_ERROR
    except KeyboardInterrupt:
        click.echo("hashaudit: interrupted", err=True)
        code = 130
    except MemoryError:
        click.echo("hashaudit: error: out of memory (try smaller --buckets)", err=True)
        code = EXIT_ERROR
    except OSError as exc:
        if _debug_requested(argv):
            traceback.print_exc()
        where = f" {exc.filename!r}" if getattr(exc, "filename", None) else ""
        click.echo(f"hashaudit: error:{where} {exc.strerror or exc}", err=True)
        code = EXIT_ERROR
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else EXIT_ERROR
    except Exception as exc:  # a bug: still one line, and the way to see more
        if _debug_requested(argv):
            traceback.print_exc()
        click.echo(f"hashaudit: internal error: {type(exc).__name__}: {exc} (rerun with --debug)", err=True)
        code = EXIT_ERROR
    sys.exit(code if isinstance(code, int) else EXIT_OK)
