"""The scoring step: find forecasts whose actuals are new or revised, score them, append to the log.

Thin layer over the warehouse: the joins are table macros in sql/55-59, the arithmetic is
`dyadcast.scoring.score.measures`. Work is found cheaply through `scoring_checks` (the actuals fingerprint
each run and target month was last scored against), and nothing is written twice because new rows are
anti-joined on their full key (run, level, origin, destination, target month, vintage, actual vintage)
against the log before writing (sql/59_scoring_rows.sql).

Rows stay in Arrow from the warehouse to the Parquet batch: the joins of a month's forecasts with its
actuals, done in pandas on text keys, were most of this step's time at 40,000 dyads.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from datetime import UTC, date, datetime
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from dyadcast.config import Config
from dyadcast.months import add_months
from dyadcast.scoring import metrics
from dyadcast.scoring.schema import ACCURACY_SCHEMA, QUANTILE_COLUMNS
from dyadcast.scoring.score import measures
from dyadcast.scoring.store import (
    accuracy_directory,
    batch_path,
    insert_rows,
    new_batch_id,
    publish,
    recover_batches,
    write_temporary,
)
from dyadcast.stores import StorePath

Progress = Callable[[str], None]
# The MASE scale's in-sample period when the caller does not pass the workspace's setting (see run_scales).
DEFAULT_TRAINING_WINDOW_MONTHS = Config.training_window_months


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


def run_scales(con: duckdb.DuckDBPyConnection, run_ids: list[str], training_window_months: int) -> int:
    """Compute and cache the MASE scales of the runs in `run_ids` that have none yet; returns how many runs.

    A run's scale is computed once, from the in-sample period its model could fit on: the months from
    cutoff - (training window + horizon) to the cutoff, as published by its as-of date. That is the period
    `dyadcast.cycle.prepare` builds the training frame from (anchor months from that month on, targets up to
    the cutoff). The horizon is the run's longest. The scale is kept, so later revisions of old months do not
    change the scale of rows already written.
    """
    runs = con.execute(
        "SELECT r.run_id, r.as_of, r.cutoff, max(f.horizon) AS horizon FROM snapshot_runs AS r "
        "JOIN forecast_rows AS f ON f.run_id = r.run_id "
        "WHERE list_contains(?, r.run_id) AND r.run_id NOT IN (SELECT run_id FROM run_naive_scales) "
        "GROUP BY ALL", [run_ids]
    ).fetchall()
    groups: dict[tuple[date, date, date], list[str]] = {}
    for run_id, as_of, cutoff, horizon in runs:
        first = add_months(cutoff, -(training_window_months + int(horizon)))
        groups.setdefault((as_of, first, cutoff), []).append(run_id)
    for (as_of, first, cutoff), ids in sorted(groups.items()):
        con.execute(
            "INSERT OR IGNORE INTO run_naive_scales "
            "SELECT run_id, level, naive_scale, n_pairs, ? FROM scoring_scales(?, ?, ?, ?)",
            [datetime.now(UTC).replace(tzinfo=None), as_of, first, cutoff, sorted(ids)],
        )
    return len(runs)


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


def accuracy_table(rows: pa.Table, scored_at: datetime, deviance_floor: float, tweedie_power: float) -> pa.Table:
    """Accuracy log rows (ACCURACY_SCHEMA, batch_id left empty) from complete rows of scoring_rows()."""
    values = measures({name: rows[name].to_numpy() for name in ("actual", "mean", *QUANTILE_COLUMNS, "p_positive")},
                      deviance_floor=deviance_floor, tweedie_power=tweedie_power)
    scale = rows["naive_scale"].to_numpy()  # NULL -> NaN
    values["scaled_error"] = values["abs_error"] / scale
    n = rows.num_rows
    columns = []
    for f in ACCURACY_SCHEMA:
        if f.name == "batch_id":
            columns.append(pa.nulls(n, pa.string()).fill_null(""))
        elif f.name == "scored_at":
            columns.append(pa.array(np.full(n, np.datetime64(scored_at, "us")), f.type))
        elif f.name in values:  # from_pandas: a NaN (undefined MASE) is stored as NULL, as before
            columns.append(pa.array(values[f.name], f.type, from_pandas=True))
        else:
            columns.append(rows[f.name].cast(f.type))
    return pa.Table.from_arrays(columns, schema=ACCURACY_SCHEMA)


def score_chunk(
    con: duckdb.DuckDBPyConnection,
    due: pd.DataFrame,
    scored_at: datetime,
    deviance_floor: float = metrics.DEVIANCE_FLOOR,
    tweedie_power: float = metrics.TWEEDIE_POWER,
    training_window_months: int = DEFAULT_TRAINING_WINDOW_MONTHS,
) -> tuple[pa.Table, int]:
    """New accuracy rows for the (run, target month, vintage) triples in `due` (rows of scoring_due()), and
    the number of total rows that wait for a destination-month not reported yet."""
    run_scales(con, sorted(due["run_id"].unique()), training_window_months)
    rows = con.sql(
        "SELECT * FROM scoring_rows(?, ?, ?)",
        params=[due["run_id"].tolist(), [_as_date(m) for m in due["target_month"]], due["vintage"].tolist()],
    ).to_arrow_table()
    incomplete = rows.num_rows - (pc.sum(rows["complete"]).as_py() or 0)
    if incomplete:
        rows = rows.filter(rows["complete"])
    return accuracy_table(rows, scored_at, deviance_floor, tweedie_power), incomplete


def _flush(
    con: duckdb.DuckDBPyConnection, directory: Path | StorePath, tables: list[pa.Table], checks: list[pd.DataFrame],
    scored_at: datetime, result: ScoreResult,
) -> None:
    """One batch: temp file, then in one transaction insert rows + checks, rename the file, commit.

    The Parquet file is encoded on a second thread while DuckDB inserts the same rows (both release the GIL;
    together they were about half of this step at 40,000 dyads); the rename still waits for both, so the
    order of the crash-safe sequence (file complete, rows inserted, rename, COMMIT) is unchanged.
    """
    if not checks:
        return
    check_rows = pd.concat(checks, ignore_index=True)[["run_id", "target_month", "vintage", "fingerprint"]]
    check_rows["checked_at"] = scored_at
    final = table = writing = None
    n_rows = sum(t.num_rows for t in tables)
    with ThreadPoolExecutor(max_workers=1) as pool:
        if n_rows:
            batch_id = new_batch_id()
            table = pa.concat_tables(tables)
            table = table.set_column(0, "batch_id", pa.nulls(n_rows, pa.string()).fill_null(batch_id))
            final = batch_path(directory, batch_id)
            writing = pool.submit(write_temporary, directory, batch_id, table)
        con.execute("BEGIN TRANSACTION")
        try:
            if table is not None:
                insert_rows(con, table)
            con.register("_scoring_checks", check_rows)
            con.execute("INSERT OR REPLACE INTO scoring_checks BY NAME SELECT * FROM _scoring_checks")
            con.unregister("_scoring_checks")
            if writing is not None and final is not None:
                publish(writing.result(), final)
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            if writing is not None:
                wait([writing])
                tmp = None if writing.exception() else writing.result()
                if tmp is not None and tmp.exists():
                    tmp.unlink()
            raise
    if final is not None and table is not None:
        result.batches.append(final)
        result.rows_written += table.num_rows
        for column, tally in (("vintage", result.rows_by_vintage), ("level", result.rows_by_level)):
            for item in pc.value_counts(table[column]).to_pylist():
                tally[item["values"]] = tally.get(item["values"], 0) + item["counts"]
        result.runs_scored = sorted(set(result.runs_scored) | set(pc.unique(table["run_id"]).to_pylist()))


def score_pending(
    con: duckdb.DuckDBPyConnection,
    accuracy_dir: Path | str,
    progress: Progress | None = None,
    *,
    deviance_floor: float = metrics.DEVIANCE_FLOOR,
    tweedie_power: float = metrics.TWEEDIE_POWER,
    max_batch_rows: int = 1_000_000,
    max_chunk_rows: int = 500_000,
    training_window_months: int = DEFAULT_TRAINING_WINDOW_MONTHS,
) -> ScoreResult:
    """Score every stored run against every actuals vintage it has not been scored against yet.

    Appends one Parquet batch (more only past `max_batch_rows`) to `accuracy_dir` and the same rows to
    `accuracy_rows`; target months are read in chunks of about `max_chunk_rows` forecast rows. Re-running
    scores nothing twice; a revision adds 'latest' rows for the affected targets. `training_window_months`
    (the workspace's `training_window_months`) bounds the in-sample period of the MASE scale of runs scored
    for the first time (see `run_scales`).
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
    tables: list[pa.Table] = []
    checks: list[pd.DataFrame] = []
    pending_rows = 0
    for chunk in month_chunks(due, max_chunk_rows):
        rows, incomplete = score_chunk(con, chunk, scored_at, deviance_floor, tweedie_power, training_window_months)
        result.totals_incomplete += incomplete
        first, last = (f"{_as_date(m):%Y-%m}" for m in (chunk["target_month"].min(), chunk["target_month"].max()))
        say(f"scoring: target months {first}..{last}: {rows.num_rows:,} new rows")
        if rows.num_rows:
            tables.append(rows)
            pending_rows += rows.num_rows
        checks.append(chunk)
        if pending_rows >= max_batch_rows:
            _flush(con, directory, tables, checks, scored_at, result)
            tables, checks, pending_rows = [], [], 0
    _flush(con, directory, tables, checks, scored_at, result)
    result.seconds = time.perf_counter() - started
    say(result.to_text())
    return result
