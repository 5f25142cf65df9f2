"""Prefect settings for a run without a server, applied before Prefect is first imported.

Prefect's temporary server needs 20–30 s to start on a small machine and times out at its 20 s
default; its state belongs in the workspace, not the home folder. Real environment variables win,
so a data engineer can point PREFECT_API_URL at a running server instead.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path


def configure_prefect(prefect_home: Path, quiet: bool = True) -> None:
    if "prefect" in sys.modules:
        return  # settings are frozen at import; nothing we set now would take effect
    defaults = {
        "PREFECT_HOME": str(prefect_home),
        "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "180",
        "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
        "PREFECT_LOGGING_TO_API_WHEN_MISSING_FLOW": "ignore",
    }
    if quiet:
        defaults["PREFECT_LOGGING_LEVEL"] = "WARNING"
    for key, value in defaults.items():
        os.environ.setdefault(key, value)
    Path(os.environ["PREFECT_HOME"]).mkdir(parents=True, exist_ok=True)
