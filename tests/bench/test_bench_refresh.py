"""The monthly cycle stage gives each model what a monthly run gives it: its mode and the stored state, and
for tweedie_gbm the previous snapshot's boosters, so a refresh continues them (bench/seed_runs.py)."""

from __future__ import annotations

from pathlib import Path

import global_panel as gp
from _tiny_warehouse import tiny_warehouse
from seed_runs import mode_of, monthly_options

from dyadcast import cycle
from dyadcast.config import Config
from dyadcast.snapshots import ARTIFACTS_KEY, index_snapshot


def _snapshot(con, store: Path, config: Config, cutoff, name: str, options: dict) -> dict:  # noqa: ANN001
    data = cycle.prepare(con, config, cutoff, gp.publication(cutoff), progress=lambda _: None)
    result = cycle.fit_and_forecast(name, data, config, options)
    index_snapshot(con, cycle.write_forecast(str(store), data, result), data.run_kind, data.as_of)
    return result.metadata["fitted_state"]


def test_a_refresh_after_a_genuine_snapshot_continues_its_boosters(tmp_path):
    con, panel = tiny_warehouse(tmp_path, gp.tiny(4))
    config = Config(models=("persistence", "tweedie_gbm"), primary_model="tweedie_gbm",
                    model_options={"tweedie_gbm": {"max_rounds": 40}})
    previous, cutoff = panel.months[-2], panel.months[-1]
    first, source = monthly_options(con, "tweedie_gbm", "refresh", previous)
    assert mode_of(first) == "fit" and source == "cycle.model_options"  # nothing stored yet: a first run fits
    stored = _snapshot(con, tmp_path / "snapshots", config, previous, "tweedie_gbm", first)
    assert stored["refresh_method"] == "fit"

    options, source = monthly_options(con, "tweedie_gbm", config.monthly_mode, cutoff)
    assert mode_of(options) == "refresh" and options["params"]["power"] == stored["power"]
    folder = Path(options["params"][ARTIFACTS_KEY])
    assert folder.name == "artifacts" and (folder / "tweedie_gbm_h1.txt").is_file()
    assert source == "cycle.model_options"  # the cycle itself passes the stored boosters
    state = _snapshot(con, tmp_path / "snapshots", config, cutoff, "tweedie_gbm", options)
    assert state["refresh_method"] == "continued" and state["continuations"] == 1, state["refresh_note"]

    assert monthly_options(con, "persistence", "refresh", cutoff) == ({}, "cycle.model_options")
    assert mode_of({}) == "n/a (no hyper-parameters)" and mode_of({"tune": True}) == "fit"
    assert mode_of(monthly_options(con, "tweedie_gbm", "fit", cutoff)[0]) == "fit"


def test_the_stored_boosters_are_passed_only_from_a_local_store_and_only_to_the_model_that_reads_them(tmp_path):
    from datetime import date

    from dyadcast.warehouse import open_warehouse

    local = tmp_path / "cutoff=2025-01" / "model=tweedie_gbm" / "run=a"
    (local / "artifacts").mkdir(parents=True)
    metadata = '{"fitted_state": {"power": {"1": 1.3}}, "artifacts": ["tweedie_gbm_h1.txt"]}'
    with open_warehouse(tmp_path / "w.duckdb") as con:
        insert = "INSERT INTO snapshot_runs VALUES (?, ?, ?, 'monthly', ?, now(), ?, ?)"
        con.execute(insert, ["a", date(2025, 1, 1), "tweedie_gbm", date(2025, 2, 1), str(local), metadata])
        options = cycle.model_options(con, "tweedie_gbm", "refresh", date(2025, 2, 1))
        assert options["params"][ARTIFACTS_KEY] == str(local / "artifacts") and options["tune"] is False
        con.execute(insert, ["b", date(2025, 1, 1), "zinb", date(2025, 2, 1), str(local), metadata])
        assert ARTIFACTS_KEY not in cycle.model_options(con, "zinb", "refresh", date(2025, 2, 1))["params"]
        con.execute(insert, ["c", date(2025, 2, 1), "tweedie_gbm", date(2025, 3, 1), "memory://bucket/run=c", metadata])
        remote = cycle.model_options(con, "tweedie_gbm", "refresh", date(2025, 3, 1))
        assert remote["params"] == {"power": {"1": 1.3}}  # object store: refit with the stored state
