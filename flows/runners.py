"""Where the model fits run: threads in the flow process (default) or a Dask cluster.

Only the fits go to Dask: they receive plain data (the prepared feature frames) and return forecasts.
The DuckDB connection, snapshot writing and indexing stay in the flow process, because a connection
cannot be pickled and the warehouse has one writer. Workers of a remote cluster need the same Python
environment as the flow (`pip install .[dask]`), since they import `flows.steps` to run the task.
"""

from __future__ import annotations

import logging
import os
import re
from typing import Any

OFF = ("off", "none", "no")
LOCAL = "local"
_ADDRESS = re.compile(r"^(?:(tcp|tls|ucx|inproc)://)?[\w.\-\[\]:]+:\d{1,5}$")


class RunnerConfigError(ValueError):
    """The Dask address is malformed; the message says the accepted forms."""


def resolve_dask_address(option: str | None = None, config_value: str = "") -> str | None:
    """The Dask scheduler to use: the CLI option, else config `dask_address`, else $DYADCAST_DASK_ADDRESS.

    `--dask off` overrides a configured address for one run. Returns None for in-process threads.
    """
    for raw in (option, config_value, os.environ.get("DYADCAST_DASK_ADDRESS")):
        value = (raw or "").strip()
        if not value:
            continue  # not given here: look further
        if value.lower() in OFF:
            return None
        if value != LOCAL and not _ADDRESS.match(value):
            raise RunnerConfigError(
                f"dask address {value!r} is not usable: give 'local' (start a cluster on this machine), "
                "a scheduler address such as tcp://10.0.0.5:8786, or 'off'"
            )
        return value
    return None


def default_threads() -> int:
    """Thread cap for in-process fits: the cores, since LightGBM and BLAS add threads of their own."""
    return max(2, os.cpu_count() or 2)


def make_task_runner(dask_address: str | None = None, workers: int | None = None) -> Any:
    """A Prefect task runner: ThreadPoolTaskRunner, or DaskTaskRunner on a new LocalCluster or an address."""
    if not dask_address:
        from prefect.task_runners import ThreadPoolTaskRunner

        return ThreadPoolTaskRunner(max_workers=workers or default_threads())
    os.environ.setdefault("DASK_LOGGING__DISTRIBUTED", "error")  # INFO chatter otherwise (prefect.md §5)
    logging.getLogger("distributed").setLevel(logging.ERROR)
    from prefect_dask import DaskTaskRunner

    if dask_address == LOCAL:
        # one thread per worker process: the fits are CPU-bound and the GIL would serialise threads
        return DaskTaskRunner(cluster_kwargs={
            "n_workers": workers or min(4, default_threads()), "threads_per_worker": 1,
            "processes": True, "dashboard_address": None,
        })
    return DaskTaskRunner(address=dask_address)


def describe_runner(dask_address: str | None, workers: int | None = None) -> str:
    if not dask_address:
        return f"in-process threads (up to {workers or default_threads()})"
    if dask_address == LOCAL:
        return f"a local Dask cluster of {workers or min(4, default_threads())} worker processes"
    return f"the Dask cluster at {dask_address}"
