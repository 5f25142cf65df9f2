"""The report's sections, each a function of the collected data that returns escaped HTML.

A section with nothing to show says why in a sentence; it never fails or stays blank.
"""

from __future__ import annotations

import pandas as pd

from dyadcast import __version__
from dyadcast.months import format_month
from dyadcast.report import plots
from dyadcast.report.collect import ReportData, select
from dyadcast.report.page import (
    bullet_list,
    empty,
    esc,
    figure,
    fmt_count,
    fmt_day,
    fmt_interval,
    fmt_month,
    fmt_pct,
    fmt_point_interval,
    fmt_ratio,
    paragraph,
    section,
    table,
)
from dyadcast.report.summary import (
    CAUTION_TEXT,
    CAUTION_TITLE,
    REFERENCE,
    coverage_sentence,
    pick_vintage,
    pooled,
    trust_sentence,
)

NOT_SCORED = ("No forecast has been scored yet: scores appear once the actual figures for a forecast's "
              "target months have been loaded.")


def _ahead(h: int) -> str:
    return "1 month ahead" if h == 1 else f"{h} months ahead"


def header(d: ReportData) -> str:
    cutoff = format_month(d.cutoff) if d.cutoff else "none yet"
    model = d.model or "none yet"
    meta = (f"Cutoff {cutoff} (the last month of data used) · model shown: {model} · "
            f"built {d.built_at:%Y-%m-%d %H:%M} UTC")
    caution = (f'<div class="caution" role="note"><strong>{esc(CAUTION_TITLE)}.</strong> '
               f"{esc(CAUTION_TEXT)}</div>")
    return f"<header><h1>Arrivals forecast and accuracy report</h1>{paragraph(meta, 'meta')}{caution}</header>"


def glance(d: ReportData) -> str:
    items = [trust_sentence(d.skill)]
    if d.model:
        items.append(coverage_sentence(pooled(d.overview), d.model))
    flows = d.freshness[d.freshness["kind"] == "flows"] if not d.freshness.empty else d.freshness
    if not flows.empty and pd.notna(flows["latest_period"].iloc[0]):
        items.append(f"The newest arrivals data is for {fmt_month(flows['latest_period'].iloc[0])}, "
                     f"published {fmt_day(flows['latest_published_on'].iloc[0])}.")
    else:
        items.append("No arrivals data has been loaded yet.")
    if not d.quarantined.empty:
        count = len(d.quarantined)
        files = "1 dropped file was" if count == 1 else f"{count} dropped files were"
        items.append(f"{files} rejected and {'is' if count == 1 else 'are'} waiting in quarantine "
                     "(see Data freshness).")
    if d.model and d.model != d.requested_model:
        items.append(f"The primary model {d.requested_model} did not run at this cutoff; {d.model} is shown instead.")
    return section("glance", "At a glance", bullet_list(items, "glance"))


def _forecast_cells(rows: pd.DataFrame, horizons: list[int]) -> list[str]:
    cells = []
    for h in horizons:
        row = rows[rows["horizon"] == h]
        cells.append("–" if row.empty else fmt_point_interval(row["q500"].iloc[0], row["q050"].iloc[0],
                                                              row["q950"].iloc[0]))
    return cells


def forecast_section(d: ReportData) -> str:
    title = "Forecast for the coming months"
    if d.forecast.empty:
        return section("forecast", title, empty("No forecast has been made yet: run a monthly cycle first."))
    fans = []
    for s in d.series:
        hist = select(d.history, s.key)
        fans.append(plots.FanSeries(s.label, hist[["month", "arrivals"]] if not hist.empty else hist,
                                    select(d.forecast, s.key)))
    intro = paragraph(
        f"Forecast by {d.model} made with data up to {format_month(d.cutoff)}. The dark band holds the middle "
        "half of likely outcomes (50 % interval), the light band nine in ten (90 % interval); the dashed line is "
        "the median. The black line shows reported arrivals (latest revision)."
    )
    body = [intro, figure(plots.fan_charts_svg(fans, "fan", columns=4),
                          "World total and the three largest destinations and origins by forecast arrivals.")]
    available = sorted(d.forecast["horizon"].unique())
    shown = [h for h in available if h in {1, 3, available[-1]}]
    months = {h: fmt_month(d.forecast.loc[d.forecast["horizon"] == h, "target_month"].iloc[0]) for h in shown}
    rows = [[s.label, *_forecast_cells(select(d.forecast, s.key), shown)] for s in d.series]
    headers = ["", *[f"{months[h]} ({_ahead(h)})" for h in shown]]
    body.append(table(rows, headers, [False, *[True] * len(shown)],
                      caption="Median forecast with the 90 % interval in brackets."))
    world = select(d.forecast, ("world_total", "*", "*")).sort_values("horizon")
    if not world.empty:
        body.append("<h3>World total, month by month</h3>")
        body.append(table(
            [[fmt_month(r.target_month), r.horizon, fmt_count(r.q500), fmt_interval(r.q250, r.q750),
              fmt_interval(r.q050, r.q950), fmt_count(r.mean)] for r in world.itertuples()],
            ["target month", "months ahead", "median", "50 % interval", "90 % interval", "mean"],
            [False, True, True, True, True, True]))
    return section("forecast", title, "".join(body))


def skill_section(d: ReportData) -> str:
    title = "Which model to trust, by horizon"
    explain = paragraph(
        "Each model is compared with persistence (next month = last reported month) on the same forecasts. "
        "The relative weighted interval score (WIS) divides a model's score by persistence's: below 1 means "
        "better than persistence, above 1 worse. WIS rewards forecasts whose ranges are narrow and still "
        "contain the reported figure."
    )
    rows = pick_vintage(d.skill)
    rows = rows[rows["model"] != REFERENCE] if not rows.empty else rows
    if rows.empty:
        return section("skill", title, paragraph(trust_sentence(d.skill)) + explain + empty(NOT_SCORED))
    horizons = sorted(rows["horizon"].unique())
    table_rows = []
    for model, part in rows.groupby("model", sort=True):
        by_h = part.set_index("horizon")
        table_rows.append([model, *[fmt_ratio(by_h["relative_wis"].get(h)) for h in horizons]])
    n_note = f"Scored forecasts compared per model and horizon: {int(rows['n_common'].min()):,}–" \
             f"{int(rows['n_common'].max()):,} (dyads, latest revision of the actuals)."
    body = [paragraph(trust_sentence(d.skill)), explain,
            figure(plots.skill_svg(rows, "skill"), "Relative WIS by months ahead; the dashed line at 1 is persistence."),
            table(table_rows, ["model", *[f"{h} mo" for h in horizons]], [False, *[True] * len(horizons)],
                  caption="Relative WIS against persistence (below 1 is better)."),
            paragraph(n_note, "note")]
    return section("skill", title, "".join(body))


def coverage_section(d: ReportData) -> str:
    title = "Are the ranges honest?"
    explain = paragraph(
        "An honest 90 % range contains the reported figure in about 9 of 10 forecasts, a 50 % range in about "
        "half. Much less means the ranges are too narrow (overconfident); much more means too wide."
    )
    rows = pooled(d.overview)
    if rows.empty:
        return section("coverage", title, explain + empty(NOT_SCORED))
    horizons = sorted(rows["horizon"].unique())
    table_rows = []
    for model, part in rows.groupby("model", sort=True):
        by_h = part.set_index("horizon")
        for column, label in (("coverage_50", "50 %"), ("coverage_90", "90 %")):
            table_rows.append([model, label, *[fmt_pct(by_h[column].get(h)) for h in horizons]])
    sentences = [coverage_sentence(rows, m) for m in ([d.model] if d.model else [])]
    body = [*(paragraph(s) for s in sentences), explain,
            figure(plots.coverage_svg(rows, "coverage"), "Share of reported figures inside the ranges; dotted "
                   "lines mark the nominal 50 % and 90 %."),
            table(table_rows, ["model", "range", *[f"{h} mo" for h in horizons]],
                  [False, False, *[True] * len(horizons)],
                  caption="Share of reported figures inside the range, pooled over all scored cutoffs (dyads).")]
    return section("coverage", title, "".join(body))


def over_time_section(d: ReportData) -> str:
    title = "Accuracy over time"
    rows = pick_vintage(d.overview)
    if rows.empty:
        return section("over-time", title, empty(NOT_SCORED))
    available = sorted(rows["horizon"].unique())
    horizons = sorted({available[0], available[-1]})
    recent = rows[rows["horizon"] == available[0]].pivot_table(index="cutoff", columns="model", values="mean_wis")
    recent = recent.sort_index(ascending=False).head(6)
    body = [
        paragraph("Mean weighted interval score per dyad for each cutoff (lower is better). A rising line means "
                  "recent forecasts missed more than earlier ones, often because arrivals themselves grew."),
        figure(plots.over_cutoffs_svg(rows, horizons, "overtime"), "Mean WIS per cutoff by model."),
        table([[fmt_month(c), *[fmt_count(v) for v in r]] for c, r in zip(recent.index, recent.to_numpy(), strict=True)],
              ["cutoff", *recent.columns], [False, *[True] * len(recent.columns)],
              caption=f"Mean WIS {_ahead(available[0])}, most recent cutoffs first."),
    ]
    return section("over-time", title, "".join(body))


def surprises_section(d: ReportData) -> str:
    title = "Surprises and early warnings"
    body = [paragraph(f"Largest surprises of {d.model or 'the primary model'}: reported arrivals furthest outside "
                      "the 90 % range, any horizon.")]
    if d.surprises.empty:
        body.append(empty("No reported figure has fallen outside a 90 % range yet (or nothing is scored yet)."))
    else:
        body.append(table(
            [[fmt_month(r.target_month), f"{r.origin} → {r.destination}", r.horizon, fmt_month(r.cutoff),
              fmt_count(r.actual), fmt_point_interval(r.q500, r.q050, r.q950), fmt_count(r.beyond_90)]
             for r in d.surprises.itertuples()],
            ["month", "origin → destination", "months ahead", "cutoff", "reported", "forecast median (90 %)",
             "outside the range by"],
            [False, False, True, False, True, True, True]))
    body.append("<h3>Exceedances one month ahead</h3>")
    body.append(paragraph("Dyads whose reported arrivals were above the top of the 90 % range one month ahead: "
                          "the early-warning list, newest first."))
    if d.exceedances.empty:
        body.append(empty("No exceedances recorded yet."))
    else:
        body.append(table(
            [[fmt_month(r.target_month), f"{r.origin} → {r.destination}", fmt_count(r.actual), fmt_count(r.q500),
              fmt_count(r.q950), fmt_count(r.excess)] for r in d.exceedances.itertuples()],
            ["month", "origin → destination", "reported", "forecast median", "top of 90 % range", "above it by"],
            [False, False, True, True, True, True]))
    return section("surprises", title, "".join(body))


def freshness_section(d: ReportData) -> str:
    title = "Data freshness"
    body = []
    if d.freshness.empty:
        body.append(empty("The warehouse has no data yet."))
    else:
        body.append(table(
            [[r.kind, "no file loaded yet" if pd.isna(r.latest_published_on) else
              (fmt_day(r.latest_period) if r.kind == "signals" else fmt_month(r.latest_period)),
              fmt_day(r.latest_published_on), r.files_loaded, r.files_rejected] for r in d.freshness.itertuples()],
            ["file kind", "latest month (day for signals)", "latest publication", "files loaded", "files rejected"],
            [False, False, False, True, True]))
    body.append("<h3>Files in quarantine</h3>")
    if d.quarantined.empty:
        body.append(empty("No file has been rejected."))
    else:
        body.append(paragraph("Each rejected file waits in the workspace's quarantine/ folder beside a report that "
                              "lists every failed check. Fix the file and drop it into the inbox again."))
        body.append(table(
            [[fmt_day(r.rejected_at), r.file_name, r.kind or "unknown", r.reason] for r in d.quarantined.itertuples()],
            ["rejected on", "file", "kind", "reason"]))
    return section("freshness", title, "".join(body))


GLOSSARY = [
    "Dyad: one origin → destination pair. Totals add dyads up per origin, per destination or for the world.",
    "Cutoff: the last month whose reported arrivals a forecast used. Horizon: months after the cutoff.",
    "Median: the middle forecast value; half of likely outcomes lie above it, half below.",
    "50 % / 90 % interval (range): where the reported figure should fall in about half / nine in ten cases.",
    "Persistence: the simplest forecast, 'next months = last reported month'. A model is only useful if it "
    "beats it.",
    "WIS (weighted interval score): a penalty that grows with the width of the ranges and with how far the "
    "reported figure falls outside them; lower is better.",
    "First release / latest revision: arrivals figures are revised after publication; scores here use the "
    "latest revision.",
]


def glossary() -> str:
    return section("glossary", "How to read this report", bullet_list(GLOSSARY))


def footer(d: ReportData) -> str:
    links = "".join(f'<li><a href="{esc(name)}">{esc(name)}</a></li>' for name in d.earlier_reports)
    earlier = f"<nav><p>Reports as issued at earlier cutoffs:</p><ul>{links}</ul></nav>" if links else ""
    return f"<footer>{earlier}<p>Made by dyadcast {esc(__version__)}. All data in this report is from the " \
           f"workspace's warehouse.</p></footer>"
