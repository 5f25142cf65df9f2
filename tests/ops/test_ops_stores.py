"""Snapshot stores as fsspec URLs: leftovers of a killed run are cleaned, and on object stores the
metadata file written last is the commit marker that makes a run visible."""

from __future__ import annotations

import importlib.util
import os
import re
import time
import uuid
from datetime import date
from pathlib import Path

import fsspec
import pandas as pd
import pytest

from dyadcast.snapshots import list_snapshots, write_snapshot
from dyadcast.stores import clean_incomplete, clean_temporary, commit_folder, is_local, list_runs, store_fs


def _forecast() -> pd.DataFrame:
    return pd.DataFrame({"level": ["dyad"], "origin": ["QMA"], "destination": ["XAB"], "horizon": [1],
                         "target_month": [pd.Timestamp("2026-02-01")], "mean": [1.0], "q050": [0.0],
                         "q250": [0.0], "q500": [1.0], "q750": [2.0], "q950": [4.0], "p_positive": [0.6]})


def test_leftover_temp_folder_is_invisible_then_removed(tmp_path: Path) -> None:
    store = tmp_path / "snapshots"
    ref = write_snapshot(store, date(2026, 1, 1), "persistence", "20260105T060000Z-aaaaaa", _forecast(),
                         {"as_of": "2026-01-20", "run_kind": "monthly"})
    # what a kill -9 in the middle of write_snapshot leaves: a hidden temp folder with a partial file
    leftover = ref.path.parent / ".tmp-20260105T060001Z-bbbbbb"
    leftover.mkdir()
    (leftover / "forecast.parquet").write_bytes(b"PAR1 partial")
    assert list_snapshots(store) == [ref.path]  # readers never see it
    assert list_runs(store) == [str(ref.path)]
    logs: list[str] = []
    removed = clean_temporary(store, log=logs.append)
    assert removed == [str(leftover)] and not leftover.exists() and ref.path.exists()
    assert "interrupted run" in logs[0]
    assert clean_temporary(store, log=logs.append) == []


def test_recent_temp_folders_can_be_spared(tmp_path: Path) -> None:
    leftover = tmp_path / "cutoff=2026-01" / "model=poisson_glm" / ".tmp-x"
    leftover.mkdir(parents=True)
    (leftover / "forecast.parquet").write_bytes(b"x")
    assert clean_temporary(tmp_path, min_age_s=3600, log=lambda _m: None) == []
    old = time.time() - 7200
    os.utime(leftover / "forecast.parquet", (old, old))
    os.utime(leftover, (old, old))
    assert clean_temporary(tmp_path, min_age_s=3600, log=lambda _m: None) == [str(leftover)]


def test_object_store_commit_marker(tmp_path: Path) -> None:
    bucket = f"memory://dyadcast-test-{uuid.uuid4().hex}"
    url = f"{bucket}/snapshots"
    assert not is_local(url) and is_local(tmp_path)
    local = tmp_path / "done"
    (local / "artifacts").mkdir(parents=True)
    (local / "forecast.parquet").write_bytes(b"data")
    (local / "artifacts" / "model.txt").write_text("coef")
    (local / "metadata.json").write_text("{}")
    fs, root = store_fs(url)
    # an upload cut short: data present, no metadata.json yet -> not a run
    fs.pipe_file(f"{root}/cutoff=2026-01/model=zinb/run=B/forecast.parquet", b"partial")
    final = f"{url}/cutoff=2026-01/model=zinb/run=A"
    commit_folder(local, final)
    assert list_runs(url) == [f"{root}/cutoff=2026-01/model=zinb/run=A"]
    assert fs.cat_file(f"{root}/cutoff=2026-01/model=zinb/run=A/artifacts/model.txt") == b"coef"
    with pytest.raises(FileExistsError, match="immutable"):
        commit_folder(local, final)
    assert clean_incomplete(url, log=lambda _m: None) == [f"{root}/cutoff=2026-01/model=zinb/run=B"]
    assert list_runs(url) == [f"{root}/cutoff=2026-01/model=zinb/run=A"]
    fsspec.filesystem("memory").rm(store_fs(bucket)[1], recursive=True)


def test_marker_is_uploaded_last(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    local = tmp_path / "run"
    local.mkdir()
    for name in ("metadata.json", "a.parquet", "z.parquet"):
        (local / name).write_text(name)
    order: list[str] = []
    fs, _ = store_fs("memory://order-test")
    monkeypatch.setattr(type(fs), "put_file", lambda self, src, dst, **kw: order.append(Path(src).name))
    commit_folder(local, "memory://order-test/run=1")
    assert order == ["a.parquet", "z.parquet", "metadata.json"]
    with pytest.raises(FileNotFoundError, match="write it before"):
        (local / "metadata.json").unlink()
        commit_folder(local, "memory://order-test/run=2")


def test_unpublished_accuracy_batch_is_removed_published_ones_stay(tmp_path: Path) -> None:
    # the scoring step's own writer makes the temporary file, so the glob follows its naming
    import pyarrow as pa

    from dyadcast.scoring.store import batch_path, list_batches, write_temporary
    from dyadcast.stores import ACCURACY_TEMP_GLOBS

    table = pa.table({"x": [1, 2]})
    published = batch_path(tmp_path, "20260105T060000Z-aaaaaa")
    write_temporary(tmp_path, "20260105T060000Z-aaaaaa", table).rename(published)
    leftover = write_temporary(tmp_path, "20260105T060500Z-bbbbbb", table)  # killed before publishing
    assert list_batches(tmp_path) == [published]
    assert clean_temporary(tmp_path, globs=ACCURACY_TEMP_GLOBS, log=lambda _m: None) == [str(leftover)]
    assert published.exists() and not leftover.exists()


@pytest.mark.parametrize(
    ("value", "advice"),
    [
        ("nosuch://bucket/snapshots", r"knows no protocol 'nosuch'; use a local folder, file:///abs/path"),
        ("https://example.org/snapshots", r"read-only; a store must take writes"),
        ("simplecache::s3://bucket/snapshots", r"chained URLs .* not supported"),
        ("file://relative/snapshots", r"absolute path with three slashes: file:///abs/path"),
        ("s3://", r"name a bucket and a prefix after s3://"),
        ("s3://bucket/snapshots?versionId=3", r"no options in the URL.*environment variables"),
    ],
)
def test_store_urls_are_checked_when_the_config_is_read(tmp_path: Path, value: str, advice: str) -> None:
    from dyadcast.config import ConfigError
    from dyadcast.workspace import init_workspace

    ws = init_workspace(tmp_path / "ws")
    ws.config_path.write_text(f'[stores]\nsnapshot = "{value}"\n', encoding="utf-8")
    with pytest.raises(ConfigError, match=r"\[stores\] snapshot = '" + re.escape(value) + "': .*" + advice):
        ws.config()
    ws.config_path.write_text("[stores]\naccuracy = 7\n", encoding="utf-8")
    with pytest.raises(ConfigError, match=r"\[stores\] accuracy = 7: give a quoted path or URL"):
        ws.config()


def test_missing_backend_says_what_to_install(tmp_path: Path) -> None:
    from dyadcast.stores import StoreError
    from dyadcast.workspace import init_workspace

    if importlib.util.find_spec("s3fs") is not None:
        pytest.skip("s3fs is installed here; the message is for environments without it")
    ws = init_workspace(tmp_path / "ws")
    ws.config_path.write_text('[stores]\naccuracy = "s3://bucket/dyadcast/accuracy"\n', encoding="utf-8")
    assert ws.config().accuracy_store == "s3://bucket/dyadcast/accuracy"  # the syntax is fine
    with pytest.raises(StoreError, match=r"Install s3fs to access S3 \(pip install it .*credentials come from"):
        ws.accuracy_store()


def test_local_stores_keep_the_folder_layout(tmp_path: Path) -> None:
    """Empty = the workspace folder; a relative path is under the workspace; file:/// is a plain folder."""
    from dyadcast.workspace import init_workspace

    ws = init_workspace(tmp_path / "ws")
    assert ws.snapshot_store() == str(ws.snapshots) and ws.accuracy_store() == str(ws.accuracy)
    elsewhere = tmp_path / "elsewhere"
    ws.config_path.write_text(f'[stores]\nsnapshot = "shared/snaps"\naccuracy = "file://{elsewhere}"\n',
                              encoding="utf-8")
    assert ws.snapshot_store() == str(ws.root / "shared" / "snaps")
    assert ws.accuracy_store() == str(elsewhere)
    plain = write_snapshot(tmp_path / "plain", date(2026, 1, 1), "persistence", "R1", _forecast(), {"as_of": "x"})
    via_url = write_snapshot(f"file://{tmp_path / 'url'}", date(2026, 1, 1), "persistence", "R1", _forecast(),
                             {"as_of": "x"})
    assert isinstance(via_url.path, Path) and via_url.path == tmp_path / "url" / plain.path.relative_to(tmp_path / "plain")
    assert sorted(p.name for p in via_url.path.iterdir()) == sorted(p.name for p in plain.path.iterdir())
