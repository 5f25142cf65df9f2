"""Helpers of the operations tests (imported by conftest.py and the test modules)."""

from __future__ import annotations

import os
import shutil
import socket
import sys
from pathlib import Path

BIN = Path(sys.executable).parent
HERE = Path(__file__).resolve().parent
SCENARIO = {"seed": 3, "start": "2021-01", "end": "2023-12", "n_origins": 6, "n_destinations": 10}
HISTORY_END = "2023-06"
CONFIG = ('[forecast]\nhorizon = 3\nmodels = ["persistence", "poisson_glm"]\nprimary_model = "poisson_glm"\n'
          "training_window_months = 24\n")


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def cli_env(api_url: str, home: Path) -> dict[str, str]:
    """Environment of a `dyadcast` subprocess: the session's server, quiet logs, one BLAS thread."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("DYADCAST_")}
    env.update({
        "PREFECT_API_URL": api_url, "PREFECT_HOME": str(home), "PREFECT_LOGGING_LEVEL": "WARNING",
        "PREFECT_SERVER_ANALYTICS_ENABLED": "false", "PREFECT_LOGGING_TO_API_WHEN_MISSING_FLOW": "ignore",
        "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1",
    })
    return env


def copy_workspace(template: Path, target: Path) -> Path:
    shutil.copytree(template, target)
    return target
