"""The model x horizon accuracy table that `dyadcast score` prints (from the view accuracy_by_horizon)."""

from __future__ import annotations

import duckdb
import pandas as pd

from dyadcast.scoring.schema import LEVELS, VINTAGES

TABLE_COLUMNS = {
    "model": "model",
    "horizon": "h",
    "n": "targets",
    "mae": "MAE",
    "mase": "MASE",
    "mean_wis": "WIS",
    "coverage_50": "cov50",
    "coverage_90": "cov90",
    "relative_wis": "rel. WIS",
}


def summary_table(con: duckdb.DuckDBPyConnection, vintage: str = "latest", level: str = "dyad") -> pd.DataFrame:
    """accuracy_by_horizon rows for one vintage and level, ordered by model and horizon."""
    if vintage not in VINTAGES:
        raise ValueError(f"vintage {vintage!r}: use one of {list(VINTAGES)}")
    if level not in LEVELS:
        raise ValueError(f"level {level!r}: use one of {list(LEVELS)}")
    return con.execute(
        "SELECT * FROM accuracy_by_horizon WHERE vintage = ? AND level = ? ORDER BY model, horizon",
        [vintage, level],
    ).df()


def format_summary(table: pd.DataFrame) -> str:
    """Plain aligned text; relative WIS below 1 means better than persistence."""
    if table.empty:
        return "no scored forecasts yet: scores appear once actuals for a forecast's target months are loaded"
    shown = table[list(TABLE_COLUMNS)].rename(columns=TABLE_COLUMNS)
    text = shown.to_string(
        index=False,
        na_rep="-",
        formatters={
            "MAE": "{:.2f}".format, "MASE": "{:.3f}".format, "WIS": "{:.2f}".format,
            "cov50": "{:.0%}".format, "cov90": "{:.0%}".format, "rel. WIS": "{:.3f}".format,
        },
    )
    notes = sorted({str(n) for n in table["note"].dropna()})
    lines = [text, "rel. WIS = model WIS / persistence WIS on targets both forecast; below 1 beats persistence.",
             "cov50 / cov90 should be near 50 % / 90 %."]
    lines += [f"note: {n}" for n in notes[:5]]
    return "\n".join(lines)
