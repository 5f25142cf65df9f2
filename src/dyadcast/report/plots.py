"""Charts for the report, drawn with matplotlib and embedded as inline SVG (no files, nothing fetched).

Colours are the Okabe & Ito (2008) colour-blind-safe set; each model also gets its own marker so the
charts read in grey print too. Text stays text in the SVG (svg.fonttype = none): smaller pages, and
matplotlib escapes it, so labels from data cannot become markup.
"""

from __future__ import annotations

import io
import re
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass

import matplotlib
import pandas as pd
from matplotlib import dates as mdates
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, MaxNLocator

INK = "#1b1b1b"
BAND = "#0072b2"  # blue: forecast bands and median
BASELINE = "#7a7a7a"  # grey: persistence and nominal lines
MODEL_COLOURS = ("#0072b2", "#e69f00", "#009e73", "#d55e00", "#cc79a7", "#56b4e9", "#f0e442")
MARKERS = ("o", "s", "^", "D", "v", "P", "X")
REFERENCE = "persistence"


@dataclass
class FanSeries:
    """One panel of the fan chart: recent actuals and the forecast quantiles of one total."""

    label: str
    history: pd.DataFrame  # month, arrivals
    forecast: pd.DataFrame  # target_month, q050, q250, q500, q750, q950


def model_styles(models: Sequence[str]) -> dict[str, dict[str, object]]:
    """Stable colour and marker per model name; persistence is always the grey dashed reference."""
    styles: dict[str, dict[str, object]] = {}
    others = sorted(m for m in set(models) if m != REFERENCE)
    for k, name in enumerate(others):
        styles[name] = {"color": MODEL_COLOURS[k % len(MODEL_COLOURS)], "marker": MARKERS[k % len(MARKERS)],
                        "linestyle": "-"}
    styles[REFERENCE] = {"color": BASELINE, "marker": "x", "linestyle": "--"}
    return styles


@contextmanager
def _style() -> Iterator[None]:
    rc = {
        "svg.fonttype": "none",
        "text.parse_math": False,  # a '$' in a label is text, not a formula
        "font.size": 10,
        "axes.edgecolor": "#888888",
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.grid": True,
        "grid.color": "#e3e3e3",
        "grid.linewidth": 0.8,
        "legend.frameon": False,
    }
    with matplotlib.rc_context(rc):
        yield


def to_svg(fig: Figure, name: str, label: str) -> str:
    """Inline SVG: no XML prolog or metadata, ids prefixed by `name` so several charts share one page."""
    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": name, "svg.fonttype": "none"}):
        fig.savefig(buffer, format="svg", metadata={"Date": None, "Creator": None})
    text = buffer.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    text = re.sub(r'\bid="([^"]+)"', rf'id="{name}-\1"', text)
    text = re.sub(r'href="#([^"]+)"', rf'href="#{name}-\1"', text)
    text = re.sub(r"url\(#([^)]+)\)", rf"url(#{name}-\1)", text)
    label = label.replace("&", "&amp;").replace('"', "&quot;").replace("<", "&lt;").replace(">", "&gt;")
    return text.replace("<svg ", f'<svg role="img" aria-label="{label}" ', 1)


def compact(value: float) -> str:
    """Tick labels that fit a small panel: 950, 12k, 120k, 1.2M."""
    size = abs(value)
    if size >= 1e6:
        return f"{value / 1e6:.3g}M"
    if size >= 1e4:
        return f"{value / 1e3:.3g}k"
    return f"{value:,.0f}" if size >= 10 else f"{value:g}"


def _thousands(ax) -> None:  # noqa: ANN001 - a matplotlib Axes
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: compact(v)))
    ax.yaxis.set_major_locator(MaxNLocator(nbins=5, min_n_ticks=3))


def _month_axis(ax, months: pd.Series, ticks: int) -> None:  # noqa: ANN001 - a matplotlib Axes
    """At most `ticks` labelled months, at a step of 1, 2, 3, 6 or 12 months, labelled YYYY-MM."""
    span = (months.max().year - months.min().year) * 12 + months.max().month - months.min().month + 1
    step = next((s for s in (1, 2, 3, 6, 12) if span / s <= ticks), 24)
    ax.xaxis.set_major_locator(mdates.MonthLocator(bymonth=range(1, 13, min(step, 12)) if step <= 12 else [1]))
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%Y-%m"))


def fan_charts_svg(series: Sequence[FanSeries], name: str, columns: int = 3) -> str:
    """Small multiples: actuals as a black line, forecast median with 50 % and 90 % bands.

    The legend takes the first empty panel, or goes under the grid when every panel is used.
    """
    with _style():
        rows = -(-len(series) // columns)
        width, height = 2.6 * columns, 2.3 * rows
        fig = Figure(figsize=(width, height))
        # fixed margins (in inches): equal panels need no layout engine, which doubled the drawing time
        fig.subplots_adjust(left=0.5 / width, right=1 - 0.3 / width, top=1 - 0.25 / height,
                            bottom=0.35 / height, wspace=0.32, hspace=0.42)
        axes = list(fig.subplots(rows, columns, squeeze=False).flat)
        for ax, item in zip(axes, series, strict=False):
            _fan_panel(ax, item)
        handles, labels = axes[0].get_legend_handles_labels()
        spare = axes[len(series):]
        for ax in spare:
            ax.set_axis_off()
        if spare:
            spare[0].legend(handles, labels, loc="center", fontsize=9)
        else:
            fig.legend(handles, labels, loc="lower center", ncols=4)
        return to_svg(fig, name, "Fan charts: " + ", ".join(s.label for s in series))


def _fan_panel(ax, item: FanSeries) -> None:  # noqa: ANN001 - a matplotlib Axes
    fc = item.forecast.sort_values("target_month")
    x = pd.to_datetime(fc["target_month"])
    ax.fill_between(x, fc["q050"], fc["q950"], color=BAND, alpha=0.18, linewidth=0, label="90 % interval")
    ax.fill_between(x, fc["q250"], fc["q750"], color=BAND, alpha=0.40, linewidth=0, label="50 % interval")
    ax.plot(x, fc["q500"], color=BAND, linestyle="--", marker="o", markersize=3, label="forecast median")
    hist = item.history.sort_values("month")
    if not hist.empty:
        ax.plot(pd.to_datetime(hist["month"]), hist["arrivals"], color=INK, linewidth=1.4, marker=".",
                markersize=4, label="reported arrivals")
    ax.set_title(item.label, loc="left", fontsize=10, fontweight="bold")
    ax.tick_params(labelsize=8)
    # A heavy upper tail would flatten the history into the axis; cut the axis and say where the band ends.
    body = max(hist["arrivals"].max() if not hist.empty else 0.0, fc["q750"].max(), 1.0)
    limit = 1.6 * body
    if fc["q950"].max() > limit:
        ax.set_ylim(0, limit)
        ax.text(0.99, 0.98, f"90 % range up to {compact(fc['q950'].max())} ↑", transform=ax.transAxes,
                ha="right", va="top", fontsize=7.5, color=BAND,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.5})
    else:
        ax.set_ylim(bottom=0)
    _thousands(ax)
    _month_axis(ax, pd.concat([x, pd.to_datetime(hist["month"])]) if not hist.empty else x, 4)


def skill_svg(skill: pd.DataFrame, name: str) -> str:
    """Relative WIS against persistence by horizon: below the line at 1 is better than persistence."""
    with _style():
        fig = Figure(figsize=(7.5, 3.2), layout="constrained")
        ax = fig.subplots()
        styles = model_styles(list(skill["model"]) + [REFERENCE])
        ax.axhline(1.0, color=BASELINE, linestyle="--", linewidth=1.2, label="persistence (= 1)")
        for model, part in skill[skill["model"] != REFERENCE].groupby("model", sort=True):
            part = part.sort_values("horizon")
            ax.plot(part["horizon"], part["relative_wis"], label=model, markersize=5, **styles[model])
        ax.set_xlabel("months ahead (horizon)")
        ax.set_ylabel("relative WIS (lower is better)")
        ax.set_title("Below the dashed line: better than persistence", loc="left", fontsize=10)
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        fig.legend(loc="outside right upper")
        return to_svg(fig, name, "Relative weighted interval score against persistence by horizon")


def coverage_svg(coverage: pd.DataFrame, name: str) -> str:
    """Share of actuals inside the 50 % and 90 % intervals by horizon, against the nominal level."""
    with _style():
        fig = Figure(figsize=(9.5, 3.2), layout="constrained")
        axes = fig.subplots(1, 2, sharey=True)
        styles = model_styles(list(coverage["model"]))
        for ax, (column, nominal) in zip(axes, (("coverage_50", 0.5), ("coverage_90", 0.9)), strict=True):
            ax.axhline(nominal, color=BASELINE, linestyle=":", linewidth=1.4, label="nominal level")
            for model, part in coverage.groupby("model", sort=True):
                part = part.sort_values("horizon")
                ax.plot(part["horizon"], part[column], label=model, markersize=5, **styles[model])
            ax.set_title(f"{100 * nominal:.0f} % interval", loc="left", fontsize=10, fontweight="bold")
            ax.set_xlabel("months ahead (horizon)")
            ax.set_ylim(0, 1.02)
            ax.xaxis.set_major_locator(MaxNLocator(integer=True))
            ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{100 * v:.0f} %"))
        axes[0].set_ylabel("actuals inside the interval")
        handles, labels = axes[1].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside right upper")
        return to_svg(fig, name, "Interval coverage against nominal by model and horizon")


def over_cutoffs_svg(by_cutoff: pd.DataFrame, horizons: Sequence[int], name: str) -> str:
    """Mean WIS per cutoff for a few horizons: is accuracy stable, improving or drifting?"""
    with _style():
        fig = Figure(figsize=(4.6 * len(horizons), 3.0), layout="constrained")
        axes = fig.subplots(1, len(horizons), squeeze=False)[0]
        styles = model_styles(list(by_cutoff["model"]))
        for ax, horizon in zip(axes, horizons, strict=True):
            part_h = by_cutoff[by_cutoff["horizon"] == horizon]
            for model, part in part_h.groupby("model", sort=True):
                part = part.sort_values("cutoff")
                ax.plot(pd.to_datetime(part["cutoff"]), part["mean_wis"], label=model, markersize=4, **styles[model])
            ax.set_title(f"{horizon} month{'s' if horizon != 1 else ''} ahead", loc="left", fontsize=10,
                         fontweight="bold")
            ax.set_xlabel("cutoff")
            ax.set_ylim(bottom=0)
            _thousands(ax)
            _month_axis(ax, pd.to_datetime(by_cutoff["cutoff"]), 4)
        axes[0].set_ylabel("mean WIS per dyad")
        handles, labels = axes[-1].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside right upper")
        return to_svg(fig, name, "Mean weighted interval score per cutoff")
