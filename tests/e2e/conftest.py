"""One Prefect test server for the whole session: its cold start costs 20-40 s on two cores."""

from __future__ import annotations

import os

import pytest


@pytest.fixture(scope="session")
def prefect_backend():
    if os.environ.get("PREFECT_API_URL"):  # reuse a running server when the developer has one
        yield
        return
    os.environ.setdefault("PREFECT_SERVER_ANALYTICS_ENABLED", "false")
    os.environ.setdefault("PREFECT_LOGGING_TO_API_WHEN_MISSING_FLOW", "ignore")
    from prefect.testing.utilities import prefect_test_harness

    with prefect_test_harness(server_startup_timeout=180):
        yield
