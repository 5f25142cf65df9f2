"""End to end: a tiny invented scenario, two monthly cycles through the Prefect flow, snapshots read back."""

from __future__ import annotations

import pandas as pd
import pytest

from dyadcast.demo.drops import publication_date, write_history_drop, write_monthly_drop
from dyadcast.demo.scenario import generate_scenario
from dyadcast.snapshots import list_snapshots, read_forecast, read_metadata
from dyadcast.warehouse import connect
from dyadcast.workspace import init_workspace

pytestmark = pytest.mark.slow


def test_two_monthly_cycles_write_readable_snapshots(tmp_path, prefect_backend) -> None:
    from flows.monthly_cycle import monthly_cycle

    ws = init_workspace(tmp_path / "ws")
    ws.config_path.write_text(
        '[forecast]\nhorizon = 3\nmodels = ["persistence", "poisson_glm"]\ntraining_window_months = 24\n',
        encoding="utf-8",
    )
    scenario = generate_scenario(seed=3, start="2021-01", end="2023-12", n_origins=12, n_destinations=30)
    write_history_drop(scenario, "2023-10", ws.inbox)
    first = monthly_cycle(workspace=str(ws.root), cutoff="2023-10", as_of=publication_date("2023-10").isoformat())
    write_monthly_drop(scenario, "2023-11", ws.inbox)
    second = monthly_cycle(workspace=str(ws.root), cutoff="2023-11", as_of=publication_date("2023-11").isoformat())

    assert first["cutoff"] == "2023-10" and second["cutoff"] == "2023-11"
    runs = list_snapshots(ws.snapshots)
    assert len(runs) == 4  # two cutoffs x (persistence, poisson_glm)
    assert not list(ws.inbox.iterdir()), "accepted files leave the inbox"
    assert list(ws.archive.iterdir())
    for path in runs:
        meta = read_metadata(path)
        frame = read_forecast(path)
        dyads = frame[frame["level"] == "dyad"]
        assert set(dyads["horizon"]) == {1, 2, 3}
        assert (dyads["q050"] <= dyads["q500"]).all() and (dyads["q500"] <= dyads["q950"]).all()
        assert dyads["p_positive"].between(0, 1).all()
        assert {"origin_total", "destination_total", "world_total"} <= set(frame["level"])
        assert meta["model"] in {"persistence", "poisson_glm"} and meta["features"]
        first_target = pd.Timestamp(meta["cutoff"] + "-01") + pd.DateOffset(months=1)
        assert dyads.loc[dyads["horizon"] == 1, "target_month"].eq(first_target).all()
    con = connect(ws.warehouse_path, read_only=True)
    try:
        assert con.execute("SELECT count(DISTINCT run_id) FROM forecast_rows").fetchone()[0] == 4
        # the 2023-11 drop brought actuals for 2023-11, so the 2023-10 runs were scored at h = 1
        scored = con.execute("SELECT count(*) FROM accuracy_rows WHERE horizon = 1").fetchone()[0]
        assert scored > 0
    finally:
        con.close()
    assert (ws.reports / "accuracy.html").is_file()
