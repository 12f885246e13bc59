"""The HTML report's figures, drawn with matplotlib and inlined as SVG.

The figures are drawn with matplotlib's object interface (``matplotlib.figure.Figure``, no pyplot, so no GUI
backend is ever chosen) and saved as SVG with text kept as text; they compute no statistic. Each figure comes with
its caption, which names the law the data is drawn against.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from hashaudit.checks import CHECKS
from hashaudit.report.page import esc, num
from hashaudit.verdict.findings import VERDICT_ORDER, Finding, table_label
from hashaudit.verdict.result import HashAudit

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["Figures", "hash_figures"]

# Okabe & Ito's colour-blind-safe palette (2008, "Color universal design").
_BLUE, _VERMILLION, _ORANGE, _SKY, _GREEN, _GREY = "#0072B2", "#D55E00", "#E69F00", "#56B4E9", "#009E73", "#555555"

_MATPLOTLIB_RC: Any = {  # Any: matplotlib types rc keys as a Literal union
    "svg.fonttype": "none",  # text stays text: small files, selectable, printed sharply
    "svg.hashsalt": "hashaudit",  # deterministic ids (each figure's ids are prefixed again below)
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 8.5,
    "axes.titlesize": 9,
    "axes.labelsize": 8.5,
    "legend.fontsize": 7.5,
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "savefig.facecolor": "white",
    "legend.frameon": False,
}
_SVG_METADATA = {"Creator": None, "Date": None, "Format": None, "Type": None}  # no timestamp, no metadata block
_RASTER_DPI = 144  # resolution of the avalanche heat map's embedded bitmap


def _plain(text: str) -> str:
    """Text for matplotlib: a dollar sign would start mathtext."""
    return text.replace("$", r"\$")


class Figures:
    """Turns matplotlib figures into inline SVG with ids unique within the page."""

    def __init__(self) -> None:
        import matplotlib

        self._matplotlib = matplotlib
        self.count = 0

    def new(self, width_inches: float, height_inches: float) -> Figure:
        """An empty figure of the given size, made under the report's matplotlib settings."""
        from matplotlib.figure import Figure

        with self._matplotlib.rc_context(_MATPLOTLIB_RC):
            return Figure(figsize=(width_inches, height_inches))

    def svg(self, figure: Figure, label: str) -> str:
        """The figure as an ``<svg>`` element: no XML prolog, no namespaces, no metadata, ids prefixed."""
        buffer = io.StringIO()
        with self._matplotlib.rc_context(_MATPLOTLIB_RC):
            figure.savefig(buffer, format="svg", metadata=_SVG_METADATA, dpi=_RASTER_DPI)
        self.count += 1
        text = buffer.getvalue()
        text = text[text.index("<svg") :]
        text = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", text)  # the HTML parser puts inline SVG in its namespace
        prefix = f"fig{self.count}-"
        text = re.sub(r'\bid="([^"]*)"', lambda m: f'id="{prefix}{m[1]}"', text)
        text = re.sub(r"url\(#([^)]*)\)", lambda m: f"url(#{prefix}{m[1]})", text)
        text = re.sub(r'href="#([^"]*)"', lambda m: f'href="#{prefix}{m[1]}"', text)
        return text.replace("<svg ", f'<svg role="img" aria-label="{esc(label)}" ', 1).strip()

    def style(self) -> Any:
        """Context manager applying the report's matplotlib settings while drawing."""
        return self._matplotlib.rc_context(_MATPLOTLIB_RC)


def _margins(figure: Figure, left: float, right: float, bottom: float, top: float, **space: float) -> None:
    """Fixed margins in inches (a layout engine would draw every figure twice to find them)."""
    width, height = figure.get_size_inches()
    figure.subplots_adjust(
        left=left / width, right=1 - right / width, bottom=bottom / height, top=1 - top / height, **space
    )


def _figure(svg: str, caption: str, wide: bool = False) -> str:
    """A ``<figure>`` holding the SVG and its caption (HTML already escaped)."""
    klass = ' class="wide"' if wide else ""
    return f"<figure{klass}>{svg}<figcaption>{caption}</figcaption></figure>"


def _plain_log_axis(ax: Axes, axis: str = "y", floor: float = 0.0) -> None:
    """Log scale ticked at 1, 2, 5, 10, 20, … in plain numbers; no minor ticks (they cost time and ink)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

    getattr(ax, f"set_{axis}scale")("log")
    target = ax.yaxis if axis == "y" else ax.xaxis
    target.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    target.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:,.10g}" if v >= floor else ""))
    target.set_minor_locator(NullLocator())


def _occupancy_figure(figures: Figures, table: dict) -> str | None:
    """The histogram of keys per bucket against the binomial expectation."""
    occupancy = table.get("occupancy") or {}
    ks, observed, expected = occupancy.get("k") or [], occupancy.get("observed") or [], occupancy.get("expected") or []
    if not ks or len(observed) != len(ks) or len(expected) != len(ks):
        return None
    labels = [str(k) for k in ks]
    observed_bars = [float(x or 0) for x in observed]
    expected_points = [float(x) if x is not None else math.nan for x in expected]
    above_observed, above_expected = occupancy.get("observed_above") or 0.0, occupancy.get("expected_above") or 0.0
    if above_observed > 0 or above_expected >= 0.5:
        labels.append(f">{ks[-1]}")
        observed_bars.append(float(above_observed))
        expected_points.append(float(above_expected))
    positions = list(range(len(labels)))
    with figures.style():
        fig = figures.new(6.4, 2.9)
        ax = fig.add_subplot()
        ax.bar(positions, observed_bars, width=0.75, color=_SKY, edgecolor=_BLUE, linewidth=0.6, label="observed")
        ax.plot(
            positions,
            expected_points,
            color="black",
            marker="o",
            markersize=3.5,
            markerfacecolor="white",
            linewidth=0.9,
            label="binomial expectation",
        )
        _plain_log_axis(ax, floor=1.0)
        ax.set_ylim(bottom=0.5)  # a bucket count below one is invisible anyway
        step = max(1, math.ceil(len(labels) / 24))
        ax.set_xticks(positions[::step], [_plain(x) for x in labels[::step]])
        ax.set_xlabel("keys in the bucket (k)")
        ax.set_ylabel("buckets holding k keys")
        ax.legend(loc="upper right")
        _margins(fig, left=0.75, right=0.15, bottom=0.5, top=0.15)
        svg = figures.svg(fig, "occupancy histogram against the binomial expectation")
    label = table_label(table.get("scheme"), table.get("buckets"))
    caption = (
        f"How many buckets of the <strong>{esc(label)}</strong> table hold exactly k keys "
        f"({esc(num(table.get('keys')))} keys, load factor {esc(num(table.get('load_factor')))}): bars observed, "
        "open markers the expectation under simple uniform hashing, m·C(n, k)·(1/m)<sup>k</sup>·(1 − 1/m)"
        "<sup>n−k</sup> (Feller, vol. 1). Logarithmic scale; a bar far from its marker is a departure."
    )
    return _figure(svg, caption)


def _no_collision_figure(figures: Figures, curve: dict) -> str | None:
    """The probability that k keys share no bucket, observed against the birthday problem."""
    keys, observed, theory = curve.get("keys") or [], curve.get("observed") or [], curve.get("theory") or []
    if not keys or len(observed) != len(keys):
        return None
    with figures.style():
        fig = figures.new(6.4, 2.9)
        ax = fig.add_subplot()
        if len(theory) == len(keys):
            ax.plot(keys, theory, color="black", linewidth=1.2, label="Q(m, k), uniform hashing")
        ax.plot(
            keys,
            observed,
            linestyle="none",
            marker="o",
            markersize=4,
            color=_VERMILLION,
            label="observed (subsets of your keys)",
        )
        ax.set_ylim(-0.03, 1.03)
        ax.set_xlim(left=0)
        ax.set_xlabel("keys in the subset (k)")
        ax.set_ylabel("probability of no collision")
        ax.legend(loc="upper right")
        _margins(fig, left=0.65, right=0.15, bottom=0.5, top=0.15)
        svg = figures.svg(fig, "probability of no collision against Q(m, k)")
    label = table_label(curve.get("scheme"), curve.get("buckets"))
    caption = (
        f"Probability that k keys share no bucket of the <strong>{esc(label)}</strong> table: each marker is the share "
        f"of {esc(num(curve.get('draws')))} random subsets of k sampled keys with no two in one bucket; the line is "
        "Q(m, k) = ∏<sub>i&lt;k</sub> (1 − i/m), the birthday problem (Feller, vol. 1, ch. II.3). Markers below the "
        "line mean the keys collide sooner than random keys would."
    )
    return _figure(svg, caption)


def _probe_figure(figures: Figures, findings: Sequence[Finding]) -> str | None:
    """Probes per lookup against the load factor, one panel per simulated table kind."""
    panels = [f for f in findings if f.details.get("loads")]
    if not panels:
        return None
    columns = min(3, len(panels))
    rows = math.ceil(len(panels) / columns)
    series = (
        ("hit", "successful", _BLUE),
        ("miss", "unsuccessful", _VERMILLION),
    )
    with figures.style():
        fig = figures.new(7.6, 2.1 * rows + 0.9)
        axes = fig.subplots(rows, columns, squeeze=False)
        for index, finding in enumerate(panels):
            ax = axes[index // columns][index % columns]
            rows_by_load = sorted(finding.details["loads"], key=lambda r: r.get("load", 0))
            loads = [float(r["load"]) for r in rows_by_load]
            for search, _word, colour in series:
                cells = [r.get(search) or {} for r in rows_by_load]

                def column(name: str, cells: list[dict] = cells) -> list[float]:
                    return [math.nan if c.get(name) is None else float(c[name]) for c in cells]

                theory = column("theory_mean")
                if any(math.isfinite(t) for t in theory):
                    ax.plot(loads, theory, color=colour, linestyle=":", linewidth=1.2)
                ax.plot(
                    loads,
                    column("ideal_mean"),
                    color=colour,
                    linestyle="--",
                    linewidth=0.9,
                    marker="s",
                    markersize=3.5,
                    markerfacecolor="white",
                )
                ax.plot(loads, column("mean"), color=colour, linestyle="-", linewidth=1.4, marker="o", markersize=3.5)
            _plain_log_axis(ax)
            ax.set_title(_plain(str(finding.details.get("table_kind", "table"))))
            ax.set_xlabel("load factor")
            if index % columns == 0:
                ax.set_ylabel("probes per lookup")
        for extra in range(len(panels), rows * columns):
            axes[extra // columns][extra % columns].set_visible(False)
        from matplotlib.lines import Line2D

        handles = [
            Line2D([], [], color=_BLUE, linewidth=2, label="successful search (hit)"),
            Line2D([], [], color=_VERMILLION, linewidth=2, label="unsuccessful search (miss)"),
            Line2D([], [], color=_GREY, marker="o", markersize=4, label="your keys"),
            Line2D([], [], color=_GREY, linestyle="--", marker="s", markerfacecolor="white", label="ideal hash"),
            Line2D([], [], color=_GREY, linestyle=":", linewidth=1.2, label="theory"),
        ]
        fig.legend(handles=handles, loc="lower center", ncols=5)
        _margins(fig, left=0.6, right=0.1, bottom=0.85, top=0.25, wspace=0.3, hspace=0.65)
        svg = figures.svg(fig, "probe cost against load factor, observed, ideal and theory")
    first = panels[0]
    slots = first.details.get("slots")
    scheme = first.details.get("scheme") or first.scheme
    caption = (
        f"Mean probes per lookup in simulated tables of {esc(num(slots))} slots (home slot by "
        f"<strong>{esc(scheme)}</strong>), filled with the hash values of the first distinct keys: solid lines your "
        "keys, dashed the same simulation fed with random values (an ideal hash), dotted Knuth's formulas where one "
        "exists (TAOCP vol. 3, §6.4). Logarithmic scale."
    )
    return _figure(svg, caption, wide=True)


def _avalanche_figure(figures: Figures, matrix: Any) -> str | None:
    """The avalanche matrix as a heat map, input bits against output bits."""
    import numpy as np

    flips = np.asarray(matrix, dtype=float)
    if flips.ndim != 2 or flips.size == 0 or not np.isfinite(flips).any():
        return None
    input_bits, output_bits = flips.shape
    from matplotlib import colormaps

    colormap = colormaps["PuOr"].with_extremes(bad="#d0d0d0")
    with figures.style():
        fig = figures.new(7.6, 1.2 + min(3.4, 0.05 * output_bits + 0.8))
        ax = fig.add_subplot()
        image = ax.imshow(
            np.ma.masked_invalid(flips.T),
            cmap=colormap,
            vmin=0.0,
            vmax=1.0,
            aspect="auto",
            interpolation="nearest",
            origin="lower",
        )
        ax.set_xlabel("input bit flipped")
        ax.set_ylabel("output bit")
        colorbar = fig.colorbar(image, ax=ax, ticks=[0, 0.25, 0.5, 0.75, 1], pad=0.01, fraction=0.04)
        colorbar.set_label("P(output bit flips)")
        _margins(fig, left=0.6, right=0.8, bottom=0.5, top=0.12)
        svg = figures.svg(fig, "avalanche matrix heat map")
    caption = (
        f"Avalanche on your keys: the probability that flipping one input bit ({input_bits} bits, columns) flips "
        f"each output bit ({output_bits} bits, rows). An ideal function gives ½ everywhere, a uniform middle tone; "
        "dark purple or dark orange cells stray from ½ in either direction (strict avalanche criterion, Webster &amp; "
        "Tavares 1985). Grey cells are undefined (input bits beyond the sampled keys' length). Colour map: "
        "ColorBrewer PuOr, diverging around ½ and readable with common colour-vision deficiencies."
    )
    return _figure(svg, caption, wide=True)


def _shard_figure(figures: Figures, finding: Finding) -> str | None:
    """Distinct keys per shard against an even share and, below, the load each shard carries (occurrences or
    summed weights) against its fair share: a hash can spread the keys evenly while a few heavy keys heat a shard."""
    counts = finding.details.get("keys_per_shard")
    if not counts:
        return None
    shards = len(counts)
    hottest = finding.details.get("hottest_shard")
    loads: list[float] | None = finding.details.get("load_per_shard")
    uneven_scheme = (finding.details.get("expected_shares_max_over_mean") or 1.0) > 1 + 1e-9
    with figures.style():
        fig = figures.new(6.4, 4.9 if loads else 2.7)
        panels = [
            (fig.add_subplot(2, 1, 1) if loads else fig.add_subplot()),
            *([fig.add_subplot(2, 1, 2)] if loads else []),
        ]
        rows = [(counts, "distinct keys", "keys")] + ([(loads, "load", "load")] if loads else [])
        for ax, (values, ylabel, label) in zip(panels, rows, strict=True):
            level = sum(values) / shards
            bars = ax.bar(range(shards), values, width=0.75, color=_SKY, edgecolor=_BLUE, linewidth=0.6, label=label)
            if isinstance(hottest, int) and 0 <= hottest < shards and values is counts:
                bars[hottest].set_hatch("///")
                bars[hottest].set_facecolor(_ORANGE)
                bars[hottest].set_label("hottest shard")
            if loads is not None and values is loads:
                heaviest = max(range(shards), key=lambda i: loads[i])
                bars[heaviest].set_hatch("///")
                bars[heaviest].set_facecolor(_ORANGE)
                bars[heaviest].set_label("most loaded shard")
            ax.axhline(level, color="black", linewidth=1.1, label="even share")
            if uneven_scheme:
                largest = level * float(finding.details["expected_shares_max_over_mean"])
                ax.axhline(largest, color=_GREEN, linestyle="--", linewidth=1.1, label="largest share of the scheme")
            low, high = min(values), max(values)
            spread = max(high - low, 0.02 * level, 1e-9 * max(level, 1.0), 1.0 if values is counts else 0.0)
            ax.set_ylim(max(0.0, low - 1.5 * spread), high + 1.5 * spread)
            ax.set_ylabel(ylabel)
            if shards <= 32:
                ax.set_xticks(range(shards))
            ax.legend(loc="upper right", ncols=3, fontsize="small")
        panels[-1].set_xlabel("shard")
        _margins(fig, left=0.75, right=0.15, bottom=0.5, top=0.15)
        svg = figures.svg(fig, "distinct keys and load per shard against an even share")
    caption = (
        f"Distinct keys on each of {shards} shards (<strong>{esc(finding.details.get('shard_scheme'))}</strong>) "
        "against an even share of the keys; the hottest shard is hatched. "
        + (
            "Below, the load each shard carries (every occurrence, or the summed weights) against an even share of "
            "the load, the most loaded shard hatched: keys spread evenly can still leave one shard hot when a few "
            "keys carry much of the load (see hot_keys). "
            if loads
            else ""
        )
        + "The vertical axes do not start at zero, so small differences show. "
        + (
            "The scheme's own shares are not even (weights or ring arcs); the dashed line is its largest share. "
            if uneven_scheme
            else ""
        )
        + f"Balance check: {esc(finding.message)}."
    )
    return _figure(svg, caption)


def _bucket_table(audit: HashAudit, tables: list[dict]) -> dict | None:
    """The table the histogram shows: the one whose bucket checks came out worst, the first on a tie."""
    if not tables:
        return None

    def rank(table: dict) -> int:
        verdicts = [
            VERDICT_ORDER.get(f.verdict, 3)
            for f in audit.findings
            if (f.scheme, f.buckets) == (table.get("scheme"), table.get("buckets"))
            and CHECKS[f.check].figure == "occupancy"
        ]
        return min(verdicts, default=3)

    return min(tables, key=rank)


def hash_figures(figures: Figures, audit: HashAudit, entry: dict, plots: dict) -> list[str]:
    """Draw the figures of one hash function's section, for whichever data the audit has.

    Parameters
    ----------
    figures : Figures
        The page's figure maker; it numbers the figures so that their SVG ids stay unique within the page.
    audit : HashAudit
        The hash function's findings.
    entry : dict
        The hash function's entry of the JSON report (its ``tables`` give the occupancy histogram).
    plots : dict
        The hash function's entry of ``AuditResult.plots`` (``no_collision`` curve, ``avalanche`` matrix).

    Returns
    -------
    list of str
        ``<figure>`` elements in page order: occupancy histogram, probability of no collision, probe cost,
        avalanche matrix, shard loads; a figure without data is left out.
    """
    parts: list[str | None] = []
    table = _bucket_table(audit, entry.get("tables") or [])
    if table is not None:
        parts.append(_occupancy_figure(figures, table))
    if isinstance(plots.get("no_collision"), dict):
        parts.append(_no_collision_figure(figures, plots["no_collision"]))
    probe = [f for f in audit.findings if CHECKS[f.check].figure == "probes"]
    if probe:
        parts.append(_probe_figure(figures, probe))
    if plots.get("avalanche") is not None:
        parts.append(_avalanche_figure(figures, plots["avalanche"]))
    for finding in audit.findings:
        if CHECKS[finding.check].figure == "shards":
            parts.append(_shard_figure(figures, finding))
    return [p for p in parts if p]
