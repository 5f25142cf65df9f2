"""Config, workspace, months, warehouse and snapshot plumbing (no Prefect, no models)."""

from __future__ import annotations

import json
from datetime import date

import numpy as np
import pandas as pd
import pytest

from dyadcast.config import ConfigError, load_config
from dyadcast.models.base import finalize_forecast, quantile_column
from dyadcast.months import (
    add_months,
    format_month,
    month_from_index,
    month_index,
    month_range,
    month_starts,
    parse_month,
)
from dyadcast.snapshots import (
    SnapshotExistsError,
    index_snapshot,
    list_snapshots,
    new_run_id,
    read_forecast,
    reindex_missing,
    write_snapshot,
)
from dyadcast.warehouse import apply_sql, connect
from dyadcast.workspace import WorkspaceError, init_workspace, open_workspace


def test_month_arithmetic_crosses_years() -> None:
    assert add_months(date(2024, 11, 1), 3) == date(2025, 2, 1)
    assert add_months(date(2024, 1, 1), -1) == date(2023, 12, 1)
    assert format_month(parse_month("2026-03")) == "2026-03"
    assert len(month_range(date(2024, 11, 1), date(2025, 2, 1))) == 4
    for bad in ("2026-13", "2026-3", "26-03", "2026/03"):
        with pytest.raises(ValueError, match="YYYY-MM"):
            parse_month(bad)


def test_init_writes_a_config_that_loads_with_defaults(tmp_path) -> None:
    ws = init_workspace(tmp_path / "ws")
    for name in ("inbox", "archive", "quarantine", "snapshots", "accuracy", "reports"):
        assert (ws.root / name).is_dir()
    config = open_workspace(ws.root).config()
    assert config.horizon == 6
    assert config.quantiles == (0.05, 0.25, 0.5, 0.75, 0.95)
    assert config.schedule.cron == "0 6 5 * *"


def test_init_keeps_an_existing_config(tmp_path) -> None:
    ws = init_workspace(tmp_path)
    ws.config_path.write_text("[forecast]\nhorizon = 3\n", encoding="utf-8")
    init_workspace(tmp_path)
    assert open_workspace(tmp_path).config().horizon == 3


def test_not_a_workspace_says_how_to_make_one(tmp_path) -> None:
    with pytest.raises(WorkspaceError, match="dyadcast init"):
        open_workspace(tmp_path)


def test_workspace_from_environment(tmp_path, monkeypatch) -> None:
    init_workspace(tmp_path)
    monkeypatch.setenv("DYADCAST_WORKSPACE", str(tmp_path))
    assert open_workspace().root == tmp_path.resolve()


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("[forecast]\nhorizn = 3\n", "unknown key"),
        ("[forecast]\nquantiles = [0.1, 0.9]\n", "add"),
        ("[forecast]\nhorizon = 0\n", "horizon"),
        ("[forecast]\nmonthly_mode = 'weekly'\n", "monthly_mode"),
        ("[forecast]\nmodels = [\"persistance\"]\n", "unknown model"),
        ("[forecast\n", "not valid TOML"),
    ],
)
def test_bad_config_is_named(tmp_path, text: str, message: str) -> None:
    path = tmp_path / "dyadcast.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError, match=message):
        load_config(path)


def test_quantile_columns_are_sql_friendly() -> None:
    assert [quantile_column(q) for q in (0.025, 0.05, 0.5, 0.95)] == ["q025", "q050", "q500", "q950"]


def test_finalize_forecast_uncrosses_and_clips() -> None:
    levels = (0.05, 0.25, 0.5, 0.75, 0.95)
    frame = pd.DataFrame({
        "origin": ["QMA"], "destination": ["XAA"], "horizon": [1], "target_month": [pd.Timestamp("2025-01-01")],
        "mean": [-1.0], "q050": [-2.0], "q250": [3.0], "q500": [1.0], "q750": [5.0], "q950": [4.0],
        "p_positive": [1.2],
    })
    out = finalize_forecast(frame, levels)
    q = out[[quantile_column(x) for x in levels]].to_numpy()[0]
    assert list(q) == [0.0, 3.0, 3.0, 5.0, 5.0]
    assert out["mean"].iloc[0] == 0.0 and out["p_positive"].iloc[0] == 1.0


def _forecast(n: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(0)
    mean = rng.gamma(2.0, 10.0, n)
    return pd.DataFrame({
        "level": "dyad", "origin": ["QMA"] * n, "destination": [f"XA{chr(65 + i)}" for i in range(n)],
        "horizon": np.ones(n, dtype="int16"), "target_month": pd.Timestamp("2025-02-01"), "mean": mean,
        "q050": mean * 0.2, "q250": mean * 0.6, "q500": mean, "q750": mean * 1.4, "q950": mean * 2.5,
        "p_positive": np.full(n, 0.9),
    })


def test_snapshot_is_written_once_and_indexed(tmp_path) -> None:
    con = connect(tmp_path / "w.duckdb")
    apply_sql(con)
    run_id = new_run_id()
    forecast = _forecast()
    ref = write_snapshot(tmp_path / "snap", date(2025, 1, 1), "persistence", run_id, forecast,
                         {"as_of": "2025-02-10", "run_kind": "monthly"})
    assert ref.path.relative_to(tmp_path / "snap").parts == ("cutoff=2025-01", "model=persistence", f"run={run_id}")
    meta = json.loads((ref.path / "metadata.json").read_text())
    assert meta["run_id"] == run_id and "duckdb" in meta["versions"]
    pd.testing.assert_frame_equal(read_forecast(ref.path), forecast)
    with pytest.raises(SnapshotExistsError):
        write_snapshot(tmp_path / "snap", date(2025, 1, 1), "persistence", run_id, forecast, {})
    assert index_snapshot(con, ref, "monthly", date(2025, 2, 10)) == 4
    assert index_snapshot(con, ref, "monthly", date(2025, 2, 10)) == 0  # idempotent
    assert con.execute("SELECT count(*) FROM forecast_rows").fetchone()[0] == 4


def test_failed_snapshot_leaves_nothing_visible(tmp_path) -> None:
    def broken_artifacts(_directory):
        raise OSError("disk full")

    with pytest.raises(OSError):
        write_snapshot(tmp_path, date(2025, 1, 1), "m", new_run_id(), _forecast(), {}, broken_artifacts)
    assert list_snapshots(tmp_path) == []
    assert not any(p.name.startswith(".tmp") for p in tmp_path.rglob("*"))


def test_reindex_picks_up_snapshots_missing_from_the_warehouse(tmp_path) -> None:
    con = connect(tmp_path / "w.duckdb")
    apply_sql(con)
    write_snapshot(tmp_path / "snap", date(2025, 1, 1), "m", new_run_id(), _forecast(),
                   {"as_of": "2025-02-10", "run_kind": "backtest"})
    assert reindex_missing(con, tmp_path / "snap") == 1
    assert reindex_missing(con, tmp_path / "snap") == 0
    assert con.execute("SELECT run_kind FROM snapshot_runs").fetchone()[0] == "backtest"


def test_model_options_reach_the_config(tmp_path) -> None:
    path = tmp_path / "dyadcast.toml"
    path.write_text("[model_options.zinb]\nmax_rows = 1000\n", encoding="utf-8")
    assert load_config(path).model_options == {"zinb": {"max_rows": 1000}}
    path.write_text("[model_options]\nzinb = 3\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="one table per model"):
        load_config(path)


def test_month_index_round_trips_one_by_one_and_as_an_array() -> None:
    days = [date(1999, 12, 1), date(2000, 1, 1), date(2024, 2, 1), date(2031, 7, 1)]
    assert [month_from_index(month_index(d)) for d in days] == days
    starts = month_starts(np.array([month_index(d) for d in days]))
    assert starts.dtype == np.dtype("datetime64[us]")
    assert list(starts.astype("datetime64[D]").astype(object)) == days
