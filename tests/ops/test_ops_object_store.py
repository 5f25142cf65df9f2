"""Snapshot and accuracy stores on an object store (fsspec `memory://`, which like S3 has no rename).

A whole monthly cycle with both stores in the object store must give the same forecasts and accuracy rows as
the same cycle on local folders, readable through the analyst views; a failure at every write boundary must
leave nothing half-visible, lose nothing and double nothing once the next run has recovered.
"""

from __future__ import annotations

import shutil
import uuid
from collections.abc import Iterator
from datetime import date
from pathlib import Path

import duckdb
import fsspec
import pandas as pd
import pytest
from click.testing import CliRunner
from fsspec.implementations.memory import MemoryFileSystem
from ops_support import CONFIG, copy_workspace

from dyadcast import cycle
from dyadcast.cli import main
from dyadcast.months import parse_month
from dyadcast.scoring import read_accuracy_log, rebuild_accuracy_index, score_pending
from dyadcast.scoring.schema import ROW_KEY
from dyadcast.snapshots import (
    METADATA_FILE,
    SnapshotExistsError,
    index_snapshot,
    list_snapshots,
    read_forecast,
    reindex_missing,
    snapshot_dir,
)
from dyadcast.stores import StorePath, clean_temporary, store_fs
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import open_workspace

CUTOFF = "2023-05"  # its targets 2023-06 already have actuals in the template, so scoring has work
AS_OF = date(2023, 6, 20)


class FaultyMemoryFS(MemoryFileSystem):
    """An in-memory object store that breaks at the n-th write, as a killed process or a lost PUT would.

    `fail_at(n, after_write)`: writes before the n-th succeed; the n-th raises, before storing the object
    (the PUT never happened) or after (it happened but the caller never learned). From then on the store is
    dead (writes and deletes raise), so no clean-up code can tidy what a real crash would leave.
    `fail_once(name_part, after_write)`: only the first PUT whose path contains `name_part` fails (a network
    error that a retry gets past).
    """

    protocol = "faultmem"
    store: dict = {}  # noqa: RUF012 - its own objects, apart from memory://
    pseudo_dirs = [""]  # noqa: RUF012
    writes = 0
    fail_on: int | None = None
    after_write = False
    dead = False
    once: list[tuple[str, bool]] = []  # noqa: RUF012

    @classmethod
    def fail_at(cls, n: int, after_write: bool = False) -> None:
        cls.writes, cls.fail_on, cls.after_write, cls.dead = 0, n, after_write, False

    @classmethod
    def fail_once(cls, name_part: str, after_write: bool = False) -> None:
        cls.once.append((name_part, after_write))

    @classmethod
    def revive(cls) -> None:
        cls.writes, cls.fail_on, cls.dead, cls.once = 0, None, False, []

    def _check(self) -> None:
        if type(self).dead:
            raise OSError("object store unreachable (simulated: the process is gone)")

    def put_file(self, lpath, rpath, *args, **kwargs):  # noqa: ANN001, ANN002, ANN003, ANN201
        cls = type(self)
        self._check()
        cls.writes += 1
        for rule in cls.once:
            if rule[0] in rpath:
                cls.once.remove(rule)
                if rule[1]:
                    super().put_file(lpath, rpath, *args, **kwargs)
                raise OSError(f"PUT {rpath} failed (simulated, once)")
        if cls.fail_on is not None and cls.writes == cls.fail_on:
            cls.dead = True
            if cls.after_write:
                super().put_file(lpath, rpath, *args, **kwargs)
            raise OSError(f"PUT {rpath} failed (simulated write {cls.writes})")
        return super().put_file(lpath, rpath, *args, **kwargs)

    def rm(self, path, recursive=False, maxdepth=None):  # noqa: ANN001, ANN201
        self._check()
        return super().rm(path, recursive=recursive, maxdepth=maxdepth)


fsspec.register_implementation("faultmem", FaultyMemoryFS, clobber=True)


def _bucket(protocol: str = "memory") -> str:
    return f"{protocol}://dyadcast-test-{uuid.uuid4().hex[:12]}"


def _drop_bucket(url: str) -> None:
    fs, root = store_fs(url)
    if fs.exists(root):
        fs.rm(root, recursive=True)


def _configure(root: Path, snapshots: str, accuracy: str) -> None:
    (root / "dyadcast.toml").write_text(
        CONFIG + f'\n[stores]\nsnapshot = "{snapshots}"\naccuracy = "{accuracy}"\n', encoding="utf-8")


def _cycle(root: Path, models: tuple[str, ...] = ("persistence", "poisson_glm")) -> list:
    """The monthly cycle's stages as the flow runs them (recover, features, fits, snapshots, scoring)."""
    ws = open_workspace(root)
    config = ws.config()
    month = parse_month(CUTOFF)
    refs = []
    with open_warehouse(ws.warehouse_path) as con:
        clean_temporary(ws.snapshot_store(), log=lambda _m: None)
        reindex_missing(con, ws.snapshot_store())
        data = cycle.prepare(con, config, month, AS_OF, "monthly", progress=lambda _m: None)
        for name in models:
            result = cycle.fit_and_forecast(name, data, config, cycle.model_options(con, name, "refresh", month))
            ref = cycle.write_forecast(ws.snapshot_store(), data, result)
            index_snapshot(con, ref, "monthly", AS_OF)
            refs.append(ref)
        score_pending(con, ws.accuracy_store())
    return refs


def _sql(root: Path, query: str) -> pd.DataFrame:
    result = CliRunner().invoke(main, ["sql", "--workspace", str(root), "--csv", query])
    assert result.exit_code == 0, result.output
    from io import StringIO

    return pd.read_csv(StringIO(result.output))


def _sorted(frame: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    return frame.sort_values(keys).reset_index(drop=True)


@pytest.fixture
def buckets() -> Iterator[tuple[str, str]]:
    snapshots, accuracy = _bucket() + "/snapshots", _bucket() + "/accuracy"
    yield snapshots, accuracy
    for url in (snapshots, accuracy):
        _drop_bucket(url)


def test_monthly_cycle_on_object_store_equals_local(
    tmp_path: Path, loaded_template: Path, buckets: tuple[str, str]
) -> None:
    local = copy_workspace(loaded_template, tmp_path / "local")
    remote = copy_workspace(loaded_template, tmp_path / "remote")
    _configure(remote, *buckets)
    local_refs, remote_refs = _cycle(local), _cycle(remote)

    # nothing went to the workspace folders; every run is a URL in the object store, committed by its marker
    assert not any((remote / "snapshots").iterdir()) and not any((remote / "accuracy").iterdir())
    runs = list_snapshots(buckets[0])
    assert sorted(runs) == sorted(str(r.path) for r in remote_refs) and len(runs) == 2
    assert all(isinstance(r, StorePath) and r.startswith("memory://") and (r / METADATA_FILE).is_file()
               for r in runs)
    assert all((r.path / "artifacts").exists() for r in remote_refs if r.model == "poisson_glm")
    paths = _sql(remote, "SELECT DISTINCT path FROM snapshot_runs ORDER BY path")["path"].tolist()
    assert paths == sorted(runs), "the warehouse records where each run lives"

    # the same forecasts, file for file and through the analyst view
    for ours, theirs in zip(remote_refs, local_refs, strict=True):
        keys = ["level", "origin", "destination", "horizon"]
        pd.testing.assert_frame_equal(_sorted(read_forecast(ours.path), keys), _sorted(read_forecast(theirs.path), keys))
    query = ("SELECT model, level, origin, destination, horizon, target_month, mean, q050, q500, q950, p_positive "
             "FROM forecasts_all ORDER BY ALL")
    from_remote = _sql(remote, query)
    assert len(from_remote) == sum(len(read_forecast(r)) for r in runs)
    pd.testing.assert_frame_equal(from_remote, _sql(local, query))

    # the same accuracy rows, in the log objects and in the warehouse
    query = ("SELECT model, level, origin, destination, target_month, vintage, actual_load_id, actual, abs_error, "
             "wis, covered_90 FROM accuracy_log ORDER BY ALL")
    scored = _sql(remote, query)
    assert len(scored) > 0
    pd.testing.assert_frame_equal(scored, _sql(local, query))
    log = read_accuracy_log(buckets[1])
    assert len(log) == len(scored) and set(log["batch_id"]) == set(_sql(remote, "SELECT batch_id FROM accuracy_rows")
                                                                   ["batch_id"])
    with open_warehouse(remote / "warehouse.duckdb") as con:
        assert rebuild_accuracy_index(con, buckets[1]) == len(scored)


def _count(con: duckdb.DuckDBPyConnection, table: str) -> int:
    return con.execute(f"SELECT count(*) FROM {table}").fetchone()[0]


@pytest.fixture(scope="module")
def prepared(tmp_path_factory: pytest.TempPathFactory, loaded_template: Path) -> tuple[Path, cycle.PreparedData]:
    """Features of the cutoff, built once: the fault tests only write, index and score."""
    root = copy_workspace(loaded_template, tmp_path_factory.mktemp("prepared") / "ws")
    ws = open_workspace(root)
    with open_warehouse(ws.warehouse_path) as con:
        data = cycle.prepare(con, ws.config(), parse_month(CUTOFF), AS_OF, "monthly", progress=lambda _m: None)
    return root, data


@pytest.fixture
def faulty(tmp_path: Path, prepared: tuple[Path, cycle.PreparedData]) -> Iterator[tuple[Path, str, str]]:
    root = copy_workspace(prepared[0], tmp_path / "ws")
    snapshots, accuracy = _bucket("faultmem") + "/snapshots", _bucket("faultmem") + "/accuracy"
    _configure(root, snapshots, accuracy)
    FaultyMemoryFS.revive()
    yield root, snapshots, accuracy
    FaultyMemoryFS.revive()
    for url in (snapshots, accuracy):
        _drop_bucket(url)


def _forecast(root: Path, data: cycle.PreparedData, name: str = "persistence") -> cycle.ModelForecast:
    return cycle.fit_and_forecast(name, data, open_workspace(root).config())


@pytest.mark.parametrize("fail_on", [1, 2])  # persistence uploads forecast.parquet, then metadata.json
def test_snapshot_upload_cut_short_is_invisible_then_cleaned(
    faulty: tuple[Path, str, str], prepared: tuple[Path, cycle.PreparedData], fail_on: int
) -> None:
    root, store, _ = faulty
    data = prepared[1]
    result = _forecast(root, data)
    FaultyMemoryFS.fail_at(fail_on)
    with pytest.raises(OSError, match="simulated"):
        cycle.write_forecast(store, data, result, "20230620T060000Z-aaaaaa")
    FaultyMemoryFS.revive()  # the next run
    fs, base = store_fs(store)
    left = fs.find(base)
    assert len(left) == fail_on - 1, "the objects PUT before the failure are still there ..."
    assert list_snapshots(store) == [], "... but without their marker no reader sees a run"
    with open_warehouse(root / "warehouse.duckdb") as con:
        assert reindex_missing(con, store) == 0 and _count(con, "snapshot_runs") == 0
    removed = clean_temporary(store, log=lambda _m: None)
    assert len(removed) == (1 if left else 0) and fs.find(base) == []
    # the step's retry reuses its run id and completes
    ref = cycle.write_forecast(store, data, result, "20230620T060000Z-aaaaaa")
    assert list_snapshots(store) == [ref.path]
    pd.testing.assert_frame_equal(read_forecast(ref.path), result.forecast.reset_index(drop=True))


def test_retry_over_a_partial_upload_of_the_same_run_replaces_it(
    faulty: tuple[Path, str, str], prepared: tuple[Path, cycle.PreparedData]
) -> None:
    root, store, _ = faulty
    result = _forecast(root, prepared[1], "poisson_glm")  # uploads artifacts/, forecast.parquet, metadata.json
    stale = cycle.ModelForecast(result.model, result.forecast.assign(mean=-1.0), result.metadata, result.fitted)
    FaultyMemoryFS.fail_at(3)  # the marker's PUT fails
    with pytest.raises(OSError, match="simulated"):
        cycle.write_forecast(store, prepared[1], stale, "20230620T060000Z-bbbbbb")
    FaultyMemoryFS.revive()
    partial = snapshot_dir(store, prepared[1].cutoff, "poisson_glm", "20230620T060000Z-bbbbbb")

    def names(path: StorePath) -> list[str]:
        fs, base = store_fs(path)
        return sorted(p[len(base) + 1:] for p in fs.find(base))

    assert names(partial) == ["artifacts/coefficients.csv", "forecast.parquet"]
    ref = cycle.write_forecast(store, prepared[1], result, "20230620T060000Z-bbbbbb")  # no clean-up in between
    assert names(ref.path) == ["artifacts/coefficients.csv", "forecast.parquet", METADATA_FILE]
    pd.testing.assert_frame_equal(read_forecast(ref.path), result.forecast.reset_index(drop=True))
    assert list_snapshots(store) == [ref.path]


def test_snapshot_committed_but_not_indexed_is_indexed_once(
    faulty: tuple[Path, str, str], prepared: tuple[Path, cycle.PreparedData]
) -> None:
    root, store, _ = faulty
    data = prepared[1]
    ref = cycle.write_forecast(store, data, _forecast(root, data), "20230620T060000Z-cccccc")
    # killed before index_snapshot: the flow's snapshot step retries with the same run id and finds the marker
    assert (snapshot_dir(store, data.cutoff, "persistence", ref.run_id) / METADATA_FILE).is_file()
    with open_warehouse(root / "warehouse.duckdb") as con:
        assert reindex_missing(con, store) == 1
        assert reindex_missing(con, store) == 0
        assert index_snapshot(con, ref, "monthly", AS_OF) == 0
        rows = con.execute("SELECT count(*), count(DISTINCT run_id), any_value(path) FROM forecast_rows "
                           "JOIN snapshot_runs USING (run_id)").fetchone()
    assert rows == (len(read_forecast(ref.path)), 1, str(ref.path))


def test_snapshots_are_immutable_on_object_store(
    faulty: tuple[Path, str, str], prepared: tuple[Path, cycle.PreparedData]
) -> None:
    root, store, _ = faulty
    data = prepared[1]
    result = _forecast(root, data)
    ref = cycle.write_forecast(store, data, result, "20230620T060000Z-dddddd")
    before = (ref.path / "forecast.parquet").read_bytes()
    changed = cycle.ModelForecast(result.model, result.forecast.assign(mean=0.0), result.metadata, result.fitted)
    with pytest.raises(SnapshotExistsError, match="immutable"):
        cycle.write_forecast(store, data, changed, "20230620T060000Z-dddddd")
    assert (ref.path / "forecast.parquet").read_bytes() == before


def _snapshots_for_scoring(root: Path, data: cycle.PreparedData, store: str) -> None:
    with open_warehouse(root / "warehouse.duckdb") as con:
        for name in ("persistence", "rolling_mean"):
            index_snapshot(con, cycle.write_forecast(store, data, _forecast(root, data, name)), "monthly", AS_OF)


def _reference_rows(tmp_path: Path, root: Path, accuracy: str) -> pd.DataFrame:
    """What an uninterrupted scoring writes: the same warehouse, scored on a fresh copy."""
    twin = tmp_path / "twin.duckdb"
    shutil.copy(root / "warehouse.duckdb", twin)
    with open_warehouse(twin) as con:
        score_pending(con, accuracy + "-twin")
        rows = con.execute(f"SELECT {', '.join(ROW_KEY)}, actual, wis FROM accuracy_rows ORDER BY ALL").df()
    _drop_bucket(accuracy + "-twin")
    return rows


@pytest.mark.parametrize("after_write", [False, True], ids=["put-lost", "put-done-commit-lost"])
def test_scoring_failure_at_the_put_loses_and_doubles_nothing(
    tmp_path: Path, faulty: tuple[Path, str, str], prepared: tuple[Path, cycle.PreparedData], after_write: bool
) -> None:
    root, snapshots, accuracy = faulty
    _snapshots_for_scoring(root, prepared[1], snapshots)
    expected = _reference_rows(tmp_path, root, accuracy)
    assert len(expected) > 0
    fs, base = store_fs(accuracy)
    with open_warehouse(root / "warehouse.duckdb") as con:
        FaultyMemoryFS.fail_at(1, after_write=after_write)
        with pytest.raises(OSError, match="simulated"):
            score_pending(con, accuracy)
        # the transaction rolled back, as it does when the process dies before COMMIT
        assert _count(con, "accuracy_rows") == 0 and _count(con, "scoring_checks") == 0
        assert len(fs.glob(f"{base}/accuracy_*.parquet")) == (1 if after_write else 0)
        FaultyMemoryFS.revive()
        again = score_pending(con, accuracy)  # the task's retry, or the next month's run
        assert len(again.recovered_batches) == (1 if after_write else 0)
        assert again.rows_written == (0 if after_write else len(expected))
        got = con.execute(f"SELECT {', '.join(ROW_KEY)}, actual, wis FROM accuracy_rows ORDER BY ALL").df()
        doubled = con.execute(f"SELECT count(*) FROM (SELECT {', '.join(ROW_KEY)} FROM accuracy_rows "
                              "GROUP BY ALL HAVING count(*) > 1)").fetchone()[0]
        assert score_pending(con, accuracy).rows_written == 0
    pd.testing.assert_frame_equal(got, expected)
    assert doubled == 0
    assert len(read_accuracy_log(accuracy)) == len(expected), "objects and table hold the same rows"


@pytest.mark.slow
def test_monthly_flow_on_object_store_with_failed_puts_retried(
    tmp_path: Path, prefect_api: str, loaded_template: Path, faulty: tuple[Path, str, str]
) -> None:
    """The Prefect flow itself: its snapshot and scoring steps retry past a lost PUT and a PUT whose reply
    was lost; the second run of the month adds runs, never overwrites, and scores nothing twice."""
    from prefect.settings import PREFECT_API_URL, temporary_settings

    from flows.monthly_cycle import monthly_cycle

    _, snapshots, accuracy = faulty
    root = copy_workspace(loaded_template, tmp_path / "flow")
    _configure(root, snapshots, accuracy)
    FaultyMemoryFS.fail_once("model=persistence/", after_write=False)  # its forecast.parquet, the first PUT
    FaultyMemoryFS.fail_once("/accuracy_", after_write=True)
    with temporary_settings({PREFECT_API_URL: prefect_api}):
        first = monthly_cycle(workspace=str(root), cutoff=CUTOFF, as_of=AS_OF.isoformat())
        assert FaultyMemoryFS.once == [], "both failures happened"
        second = monthly_cycle(workspace=str(root), cutoff=CUTOFF, as_of=AS_OF.isoformat())
    runs = list_snapshots(snapshots)
    assert sorted(first["snapshots"] + second["snapshots"]) == runs and len(runs) == 4
    assert not any((root / "snapshots").iterdir()) and not any((root / "accuracy").iterdir())
    counts = _sql(root, "SELECT count(DISTINCT run_id) AS runs, count(*) AS rows FROM forecast_rows")
    assert counts.iloc[0].tolist() == [4, sum(len(read_forecast(r)) for r in runs)]
    keys = ", ".join(ROW_KEY)
    rows = _sql(root, f"SELECT count(*) AS n, count(DISTINCT ({keys})) AS distinct_keys FROM accuracy_rows")
    assert rows.iloc[0, 0] == rows.iloc[0, 1] == len(read_accuracy_log(accuracy)) > 0
    # the scoring retry found the batch whose PUT had landed and recovered it instead of writing it again
    assert len(first["scored"].recovered_batches) == 1 and first["scored"].rows_written == 0
    assert second["scored"].rows_written > 0 and second["scored"].recovered_batches == []
    assert (root / "reports" / "accuracy.html").is_file()
