"""The scoring step: find forecasts whose actuals are new or revised, score them, append to the log.

Thin layer over the warehouse: the queries are table macros in sql/55-59, the arithmetic is `score_frame`.
Work is found cheaply through `scoring_checks` (the actuals fingerprint each run and target month was last
scored against), and nothing is written twice because new rows are anti-joined on their full key
(run, level, origin, destination, target month, vintage, actual vintage) against the log before writing.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from datetime import UTC, date, datetime
from pathlib import Path

import duckdb
import pandas as pd

from dyadcast.scoring import metrics
from dyadcast.scoring.schema import ROW_KEY
from dyadcast.scoring.score import naive_scales, score_frame
from dyadcast.scoring.store import (
    accuracy_directory,
    batch_path,
    insert_rows,
    new_batch_id,
    publish,
    recover_batches,
    to_arrow,
    write_temporary,
)

Progress = Callable[[str], None]


@dataclass
class ScoreResult:
    rows_written: int = 0
    rows_by_vintage: dict[str, int] = field(default_factory=dict)
    rows_by_level: dict[str, int] = field(default_factory=dict)
    runs_scored: list[str] = field(default_factory=list)
    batches: list[Path] = field(default_factory=list)
    recovered_batches: list[Path] = field(default_factory=list)
    targets_checked: int = 0      # (run, target month, vintage) whose actuals were new or changed
    totals_incomplete: int = 0    # total rows waiting for an unreported destination-month
    seconds: float = 0.0

    def to_text(self) -> str:
        if not self.rows_written:
            head = f"accuracy log: no new rows ({self.targets_checked} run-target-vintages checked)"
        else:
            vint = ", ".join(f"{k} {v:,}" for k, v in sorted(self.rows_by_vintage.items()))
            lev = ", ".join(f"{k} {v:,}" for k, v in sorted(self.rows_by_level.items()))
            head = (f"accuracy log: {self.rows_written:,} new rows in {len(self.batches)} batch file(s) "
                    f"from {len(self.runs_scored)} run(s); by vintage: {vint}; by level: {lev}")
        lines = [head + f" [{self.seconds:.1f} s]"]
        if self.totals_incomplete:
            lines.append(f"  {self.totals_incomplete:,} total rows wait for destination-months not reported yet")
        if self.recovered_batches:
            lines.append(f"  recovered {len(self.recovered_batches)} batch file(s) missing from accuracy_rows")
        return "\n".join(lines)


def _quiet(_message: str) -> None:
    return None


def _as_date(value: object) -> date:
    return pd.Timestamp(value).date()


def run_scales(con: duckdb.DuckDBPyConnection, forecasts: pd.DataFrame) -> pd.DataFrame:
    """MASE scales of the runs in `forecasts`: from the cache, else computed once and cached."""
    run_ids = sorted(forecasts["run_id"].unique())
    cached = con.execute(
        "SELECT run_id, level, naive_scale FROM run_naive_scales WHERE list_contains(?, run_id)", [run_ids]
    ).df()
    missing = forecasts[~forecasts["run_id"].isin(cached["run_id"])]
    if missing.empty:
        return cached
    runs = missing[["run_id", "cutoff", "as_of"]].drop_duplicates()
    fresh = []
    for (as_of, cutoff), group in runs.groupby(["as_of", "cutoff"]):
        ids = sorted(group["run_id"])
        history = con.execute(
            "SELECT * FROM scoring_history(?, ?, ?)", [_as_date(as_of), _as_date(cutoff), ids]
        ).df()
        scope = missing.loc[(missing["level"] == "dyad") & missing["run_id"].isin(ids),
                            ["run_id", "origin", "destination"]]
        fresh.append(naive_scales(history, scope, run_ids=ids))
    computed = pd.concat(fresh, ignore_index=True)
    computed["computed_at"] = datetime.now(UTC).replace(tzinfo=None)
    con.register("_new_scales", computed)
    try:
        con.execute("INSERT OR IGNORE INTO run_naive_scales BY NAME SELECT * FROM _new_scales")
    finally:
        con.unregister("_new_scales")
    return pd.concat([cached, computed[["run_id", "level", "naive_scale"]]], ignore_index=True)


def drop_known(rows: pd.DataFrame, known: pd.DataFrame) -> pd.DataFrame:
    """Rows whose key is not in `known` (keys already in the log): the guarantee against double scoring."""
    if rows.empty or known.empty:
        return rows
    keys = list(ROW_KEY)
    marked = rows.merge(known[keys].drop_duplicates(), on=keys, how="left", indicator="_seen")
    out = marked[marked["_seen"] == "left_only"].drop(columns="_seen")
    out.attrs = rows.attrs
    return out


def month_chunks(due: pd.DataFrame, max_rows: int) -> Iterator[pd.DataFrame]:
    """Consecutive groups of target months whose forecast rows add up to about `max_rows` (memory bound)."""
    sizes = due.drop_duplicates(["run_id", "target_month"]).groupby("target_month")["n_rows"].sum().sort_index()
    months: list[object] = []
    total = 0
    for month, n in sizes.items():
        if months and total + n > max_rows:
            yield due[due["target_month"].isin(months)]
            months, total = [], 0
        months.append(month)
        total += int(n)
    if months:
        yield due[due["target_month"].isin(months)]


def score_chunk(
    con: duckdb.DuckDBPyConnection,
    due: pd.DataFrame,
    scored_at: datetime,
    deviance_floor: float = metrics.DEVIANCE_FLOOR,
    tweedie_power: float = metrics.TWEEDIE_POWER,
) -> pd.DataFrame:
    """New accuracy rows for the (run, target month, vintage) triples in `due` (rows of scoring_due())."""
    targets = sorted({_as_date(m) for m in due["target_month"]})
    run_ids = sorted(due["run_id"].unique())
    forecasts = con.execute("SELECT * FROM scoring_forecasts(?, ?)", [targets, run_ids]).df()
    actuals = con.execute("SELECT * FROM scoring_actuals(?)", [targets]).df()
    scales = run_scales(con, forecasts)
    parts, incomplete = [], 0
    for vintage, group in due.groupby("vintage"):
        pairs = group[["run_id", "target_month"]].drop_duplicates()
        scored = score_frame(
            forecasts.merge(pairs, on=["run_id", "target_month"]),
            actuals[actuals["vintage"] == vintage],
            vintage=str(vintage), naive_scales=scales, scored_at=scored_at,
            deviance_floor=deviance_floor, tweedie_power=tweedie_power,
        )
        incomplete += scored.attrs.get("totals_incomplete", 0)
        parts.append(scored)
    rows = pd.concat(parts, ignore_index=True)
    known = con.execute("SELECT * FROM accuracy_keys(?, ?)", [targets, run_ids]).df()
    rows = drop_known(rows, known)
    rows.attrs["totals_incomplete"] = incomplete
    return rows


def _flush(
    con: duckdb.DuckDBPyConnection, directory: Path, frames: list[pd.DataFrame], checks: list[pd.DataFrame],
    scored_at: datetime, result: ScoreResult,
) -> None:
    """One batch: temp file, then in one transaction insert rows + checks, rename the file, commit."""
    if not checks:
        return
    rows = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    check_rows = pd.concat(checks, ignore_index=True)[["run_id", "target_month", "vintage", "fingerprint"]]
    check_rows["checked_at"] = scored_at
    tmp = final = table = None
    if not rows.empty:
        batch_id = new_batch_id()
        rows["batch_id"] = batch_id
        table = to_arrow(rows)
        final = batch_path(directory, batch_id)
        tmp = write_temporary(directory, batch_id, table)
    con.execute("BEGIN TRANSACTION")
    try:
        if table is not None:
            insert_rows(con, table)
        con.register("_scoring_checks", check_rows)
        con.execute("INSERT OR REPLACE INTO scoring_checks BY NAME SELECT * FROM _scoring_checks")
        con.unregister("_scoring_checks")
        if tmp is not None and final is not None:
            publish(tmp, final)
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        if tmp is not None and tmp.exists():
            tmp.unlink()
        raise
    if final is not None:
        result.batches.append(final)
        result.rows_written += len(rows)
        for column, tally in (("vintage", result.rows_by_vintage), ("level", result.rows_by_level)):
            for key, n in rows[column].value_counts().items():
                tally[str(key)] = tally.get(str(key), 0) + int(n)
        result.runs_scored = sorted(set(result.runs_scored) | set(rows["run_id"]))


def score_pending(
    con: duckdb.DuckDBPyConnection,
    accuracy_dir: Path | str,
    progress: Progress | None = None,
    *,
    deviance_floor: float = metrics.DEVIANCE_FLOOR,
    tweedie_power: float = metrics.TWEEDIE_POWER,
    max_batch_rows: int = 1_000_000,
    max_chunk_rows: int = 500_000,
) -> ScoreResult:
    """Score every stored run against every actuals vintage it has not been scored against yet.

    Appends one Parquet batch (more only past `max_batch_rows`) to `accuracy_dir` and the same rows to
    `accuracy_rows`; target months are read in chunks of about `max_chunk_rows` forecast rows. Re-running scores nothing twice; a revision adds 'latest' rows for the affected targets.
    """
    started = time.perf_counter()
    say = progress or _quiet
    directory = accuracy_directory(accuracy_dir)
    result = ScoreResult(recovered_batches=recover_batches(con, directory))
    if result.recovered_batches:
        say(f"scoring: restored {len(result.recovered_batches)} batch file(s) into accuracy_rows")
    due = con.execute("SELECT * FROM scoring_due()").df()
    result.targets_checked = len(due)
    scored_at = datetime.now(UTC).replace(tzinfo=None)
    frames: list[pd.DataFrame] = []
    checks: list[pd.DataFrame] = []
    pending_rows = 0
    for chunk in month_chunks(due, max_chunk_rows):
        rows = score_chunk(con, chunk, scored_at, deviance_floor, tweedie_power)
        result.totals_incomplete += rows.attrs.get("totals_incomplete", 0)
        first, last = (f"{_as_date(m):%Y-%m}" for m in (chunk["target_month"].min(), chunk["target_month"].max()))
        say(f"scoring: target months {first}..{last}: {len(rows):,} new rows")
        if not rows.empty:
            frames.append(rows)
            pending_rows += len(rows)
        checks.append(chunk)
        if pending_rows >= max_batch_rows:
            _flush(con, directory, frames, checks, scored_at, result)
            frames, checks, pending_rows = [], [], 0
    _flush(con, directory, frames, checks, scored_at, result)
    result.seconds = time.perf_counter() - started
    say(result.to_text())
    return result
