"""The accuracy report: files written, sections filled from the data, safe and self-contained HTML."""

from __future__ import annotations

import html
import re
from datetime import date

import duckdb
import pytest
from conftest import XSS, workspace_with
from report_warehouse import CUTOFFS, counted_rows, scoring_view_rows

from dyadcast.report import build_report, report_summary_markdown
from dyadcast.report.artifacts import md
from dyadcast.report.build import dated_name
from dyadcast.report.collect import collect
from dyadcast.report.page import fmt_count
from dyadcast.report.sections import glance
from dyadcast.report.summary import CAUTION_TITLE, choices, trust_sentence

LAST_CUTOFF = CUTOFFS[-1]
EXTERNAL = re.compile(r"""(?:src|href|action|poster|srcset)\s*=\s*["']?\s*(?:[a-z][a-z0-9+.-]*:)?//""", re.I)


def static_problems(text: str) -> list[str]:
    """Everything that would make the page run code or fetch something when opened. Attributes are looked
    for inside tags only: escaped text such as '&lt;img onerror=…&gt;' is harmless and is not a tag."""
    problems = []
    tags = re.findall(r"<[a-zA-Z][^>]*>", text)
    if any(re.match(r"<script\b", t, re.I) for t in tags):
        problems.append("a <script> element")
    for tag in tags:
        if EXTERNAL.search(tag):
            problems.append(f"an external reference: {tag[:80]}")
        if re.search(r"\son[a-z]+\s*=", tag, re.I):
            problems.append(f"an inline event handler: {tag[:80]}")
    if re.search(r"@import|url\(\s*['\"]?\s*(?:[a-z]+:)?//", text, re.I):
        problems.append("a CSS import or remote url()")
    return problems


def test_report_and_dated_copy_are_written(ro, ws_fixture) -> None:
    path = build_report(ro, ws_fixture)
    assert path == ws_fixture.reports / "accuracy.html"
    dated = ws_fixture.reports / dated_name(LAST_CUTOFF)
    assert dated.name == "accuracy_2025-03.html" and dated.read_text() == path.read_text()
    # an older cutoff gets its own copy, and the current page links to the copies kept before it
    build_report(ro, ws_fixture, date(2025, 2, 1))
    current = path.read_text()
    assert (ws_fixture.reports / "accuracy_2025-02.html").is_file()
    assert "Cutoff 2025-02" in current and 'href="accuracy_2025-03.html"' in current
    assert not list(ws_fixture.reports.glob(".*.tmp")), "temporary files are renamed into place"


def test_sections_carry_caution_forecast_skill_and_coverage(report_html, fixture_wh) -> None:
    text = report_html
    assert text.index(CAUTION_TITLE) < text.index('id="forecast"'), "the caution comes before any figure"
    for anchor in ("glance", "forecast", "skill", "coverage", "over-time", "surprises", "freshness"):
        assert f'<section id="{anchor}">' in text
    assert text.count("<svg") == 4, "fan charts, skill, coverage and accuracy over time"
    assert "below 1 means better than persistence" in text
    # the world total's median one month ahead is the one the newest poisson_glm run wrote
    fc = fixture_wh.forecasts
    run = fc[(fc.model == "poisson_glm") & (fc.cutoff == LAST_CUTOFF)]
    world = run[(run.level == "world_total") & (run.horizon == 1)].iloc[0]
    cell = f"{fmt_count(world.q500)} (90 %: {fmt_count(world.q050)}–{fmt_count(world.q950)})"
    assert html.escape(cell) in text
    # data freshness: the stale destination indicators and the quarantined file with its reason
    assert "destination_indicators</td><td>2025-02" in text
    assert "flows_2025-04-10.csv" in text and html.escape("column 'arivals' is not expected") in text


def test_trust_sentence_names_the_best_model_per_horizon(ro, fixture_wh) -> None:
    """Relative WIS recomputed in pandas from the inserted rows (common targets with persistence) picks the
    same model per horizon as the report does from the skill_vs_persistence view."""
    rows = scoring_view_rows(fixture_wh.accuracy)
    rows = rows[(rows.level == "dyad") & (rows.vintage == "latest")]
    keys = ["cutoff", "run_kind", "origin", "destination", "target_month", "horizon", "actual_vintage_key"]
    base = rows[rows.model == "persistence"][keys + ["wis"]]
    expected = {}
    for h in sorted(rows.horizon.unique()):
        ratios = {}
        for model in ("poisson_glm", "tweedie_gbm"):
            both = rows[(rows.model == model) & (rows.horizon == h)].merge(base, on=keys, suffixes=("", "_p"))
            ratios[model] = both.wis.sum() / both.wis_p.sum()
        best = min(ratios, key=ratios.get)
        expected[h] = best if ratios[best] < 1 else "persistence"
    skill = ro.execute("SELECT * FROM skill_vs_persistence").fetchdf()
    assert {c.horizon: c.model for c in choices(skill)} == expected
    sentence = trust_sentence(skill)
    assert sentence.startswith("Trust ") and all(m in sentence for m in set(expected.values()))


def test_coverage_in_report_pools_cutoffs_by_count(report_html, fixture_wh) -> None:
    """The page's 90 % coverage for poisson_glm equals the share computed directly from the inserted rows."""
    rows = counted_rows(fixture_wh.accuracy)
    rows = rows[(rows.level == "dyad") & (rows.vintage == "latest") & (rows.model == "poisson_glm")]
    share = rows.covered_90.mean()
    text = report_html
    assert f"contained the reported figure in {100 * share:.0f} % of {len(rows):,} scored forecasts" in text


def test_sections_say_so_when_there_is_nothing_yet(tmp_path) -> None:
    ws = workspace_with(tmp_path, None)
    con = duckdb.connect(str(ws.warehouse_path))
    try:
        text = build_report(con, ws).read_text()
    finally:
        con.close()
    assert "No forecast has been made yet" in text
    assert "No forecast has been scored yet" in text
    assert "No arrivals data has been loaded yet" in text and "No file has been rejected" in text
    assert "<svg" not in text and not static_problems(text)
    assert not list(ws.reports.glob("accuracy_*.html")), "no cutoff, so no dated copy"


def test_forecast_without_scores(tmp_path, fixture_wh) -> None:
    """Right after the first run: a forecast exists, nothing is scored; the page still reads well."""
    ws = workspace_with(tmp_path, fixture_wh.path)
    con = duckdb.connect(str(ws.warehouse_path))
    try:
        con.execute("DELETE FROM accuracy_rows")
        text = build_report(con, ws).read_text()
    finally:
        con.close()
    assert text.count("<svg") == 1, "only the fan charts"
    assert "No forecast has been scored yet, so there is no evidence yet of which model to trust" in text


def test_primary_model_that_did_not_run_falls_back(ro) -> None:
    data = collect(ro, None, "ensemble", 6)
    assert data.model == "poisson_glm" and data.cutoff == LAST_CUTOFF
    text = glance(data)
    assert "The primary model ensemble did not run at this cutoff; poisson_glm is shown instead." in text


def test_page_is_self_contained(report_html) -> None:
    text = report_html
    assert not static_problems(text)
    assert "Content-Security-Policy" in text and "default-src 'none'" in text
    assert '<meta charset="utf-8">' in text


def test_static_check_catches_what_it_should() -> None:
    """The checker itself: each kind of leak is caught (so a clean result means something)."""
    assert static_problems('<img src="https://cdn.example/x.png">')
    assert static_problems('<link href="//cdn.example/x.css">')
    assert static_problems("<style>@import 'x.css'</style>")
    assert static_problems("<SCRIPT>1</SCRIPT>")
    assert static_problems('<div onclick="x()">')
    assert not static_problems('<a href="accuracy_2025-02.html">x</a><svg xmlns="http://www.w3.org/2000/svg">')
    assert not static_problems("<td>&lt;img src=x onerror=alert(2)&gt;</td>"), "escaped text is not markup"


def test_country_label_with_markup_is_shown_as_text(xss_wh, tmp_path) -> None:
    ws = workspace_with(tmp_path, xss_wh.path)
    con = duckdb.connect(xss_wh.path, read_only=True)
    try:
        text = build_report(con, ws).read_text()
        digest = report_summary_markdown(con, None, "poisson_glm")
    finally:
        con.close()
    assert XSS not in text and "<img src=x" not in text
    assert html.escape(XSS) in text, "the label is there, as text"
    assert html.escape("<img src=x onerror=alert(2)>") in text
    assert not static_problems(text)
    assert "<" not in digest, "the Markdown digest carries no HTML at all"
    assert md(XSS) == "&lt;script&gt;alert(1)&lt;/script&gt;" and md("a|b*c") == "a\\|b\\*c"


@pytest.mark.parametrize("value, shown", [(1234.4, "1,234"), (0.44, "0.4"), (7.0, "7"), (0.01, "<0.1"),
                                           (float("nan"), "–"), (None, "–")])
def test_counts_are_formatted_for_reading(value, shown) -> None:
    assert fmt_count(value) == shown


def test_numbers_beside_every_median_have_an_interval(report_html) -> None:
    start = report_html.index("Median forecast with the 90 % interval in brackets.")
    table_html = report_html[start:report_html.index("</table>", start)]
    cells = re.findall(r'<td class="num">([^<]*)</td>', table_html)
    assert len(cells) == 7 * 2, "7 series (world, 3 destinations, 3 origins) x 2 horizons shown"
    assert all(re.fullmatch(r"[\d,.]+ \(90 %: [\d,.]+–[\d,.]+\)", c) for c in cells), cells
