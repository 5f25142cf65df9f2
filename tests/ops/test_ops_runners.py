"""Choosing where the fits run: the CLI option beats the config, which beats the environment."""

from __future__ import annotations

import pytest

from flows.runners import LOCAL, RunnerConfigError, describe_runner, make_task_runner, resolve_dask_address


@pytest.fixture(autouse=True)
def _no_env(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("DYADCAST_DASK_ADDRESS", raising=False)


def test_precedence(monkeypatch: pytest.MonkeyPatch) -> None:
    assert resolve_dask_address(None, "") is None
    assert resolve_dask_address(None, "tcp://10.0.0.5:8786") == "tcp://10.0.0.5:8786"
    assert resolve_dask_address("local", "tcp://10.0.0.5:8786") == LOCAL
    assert resolve_dask_address("off", "tcp://10.0.0.5:8786") is None  # one run without the configured cluster
    monkeypatch.setenv("DYADCAST_DASK_ADDRESS", "dask-scheduler:8786")
    assert resolve_dask_address(None, "") == "dask-scheduler:8786"
    assert resolve_dask_address(None, "local") == LOCAL


@pytest.mark.parametrize("bad", ["tcp://nowhere", "http://10.0.0.5:8786", "10.0.0.5", "local cluster"])
def test_malformed_addresses_are_refused_with_the_accepted_forms(bad: str) -> None:
    with pytest.raises(RunnerConfigError, match="give 'local'"):
        resolve_dask_address(bad)


def test_runner_types() -> None:
    from prefect.task_runners import ThreadPoolTaskRunner
    from prefect_dask import DaskTaskRunner

    threads = make_task_runner(None, workers=3)
    assert isinstance(threads, ThreadPoolTaskRunner) and threads._max_workers == 3
    local = make_task_runner(LOCAL, workers=2)
    assert isinstance(local, DaskTaskRunner)
    assert local.cluster_kwargs["n_workers"] == 2 and local.cluster_kwargs["threads_per_worker"] == 1
    remote = make_task_runner("tcp://10.0.0.5:8786")
    assert isinstance(remote, DaskTaskRunner) and remote.address == "tcp://10.0.0.5:8786"
    assert "10.0.0.5" in describe_runner("tcp://10.0.0.5:8786") and "2 worker" in describe_runner(LOCAL, 2)
