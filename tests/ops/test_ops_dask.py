"""Scale-out: a backtest whose fits run on a Dask LocalCluster of 2 workers writes the same forecasts
as the same backtest run with in-process threads."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from ops_support import copy_workspace

from dyadcast.snapshots import list_snapshots, read_forecast, read_metadata

pytestmark = pytest.mark.slow

START, END = "2022-12", "2023-05"  # 6 cutoffs, each with the data published by then


def _forecasts(root: Path) -> dict[tuple[str, str], pd.DataFrame]:
    out = {}
    for path in list_snapshots(root / "snapshots"):
        meta = read_metadata(path)
        frame = read_forecast(path).sort_values(["level", "origin", "destination", "horizon"])
        out[(meta["cutoff"], meta["model"])] = frame.reset_index(drop=True)
    return out


def test_dask_backtest_equals_in_process(tmp_path: Path, prefect_api: str, loaded_template: Path) -> None:
    from prefect.settings import PREFECT_API_URL, temporary_settings

    from flows.backtest import backtest
    from flows.runners import make_task_runner

    threads = copy_workspace(loaded_template, tmp_path / "threads")
    dask = copy_workspace(loaded_template, tmp_path / "dask")
    with temporary_settings({PREFECT_API_URL: prefect_api}):
        backtest.with_options(task_runner=make_task_runner(None))(workspace=str(threads), start=START, end=END)
        backtest.with_options(task_runner=make_task_runner("local", workers=2))(
            workspace=str(dask), start=START, end=END)
    expected, got = _forecasts(threads), _forecasts(dask)
    assert len(expected) == 12  # 6 cutoffs x (persistence, poisson_glm)
    assert set(got) == set(expected)
    for key, frame in expected.items():
        # Worker processes may run BLAS with another thread count, which moves the last bits of a GLM fit;
        # "the same snapshots" therefore means equal to 1e-9 relative, not bit for bit.
        pd.testing.assert_frame_equal(got[key], frame, check_exact=False, rtol=1e-9, atol=1e-12,
                                      obj=f"forecast {key}")
